"""The metric registry is the one definition every layer reads (sweep.registry)."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from luxsweep.kernels.metrics import MetricParams, StepMasks, accumulate, finalize
from luxsweep.sweep import config, rank, registry, report, run, store
from luxsweep.sweep.config import MetricOptions


def _counts(params: MetricParams):
    rng = np.random.default_rng(3)
    total = np.floor(rng.lognormal(6.0, 1.0, size=(2, 5, 40))).astype(np.float32)
    masks = StepMasks(occupied=rng.random(40) < 0.5, analysis=rng.random(40) < 0.5,
                      daylight=rng.random(40) < 0.5)
    return accumulate(None, total, total * 0.3, masks, params)


def test_finalize_keys_equal_the_registry():
    params = MetricParams()
    assert set(finalize(_counts(params), params)) == registry.finalize_names()


def test_every_layer_reads_the_registry():
    assert config.METRIC_FAMILIES == registry.FAMILIES == run.FAMILIES
    assert set(config.RANK_METRICS) == {m.name for m in registry.METRICS.values() if m.rank}
    assert all(registry.METRICS[m].family == f for m, f in config.RANK_FAMILY.items())
    assert list(store.SENSOR_VARIABLES) == registry.sensor_metrics()
    assert list(store.VARIANT_VARIABLES) == [*registry.variant_metrics(), "done"]
    for name, (dtype, unit, _) in {**store.SENSOR_VARIABLES, **store.VARIANT_VARIABLES}.items():
        if name != "done":
            assert (dtype, unit) == (registry.METRICS[name].dtype, registry.METRICS[name].unit)
    assert set(report.PLAN_METRICS) <= set(registry.METRICS)
    assert not hasattr(rank, "METRICS")
    # every family's results are kept when the family is listed, none twice
    sensor, variant = registry.store_variables(list(registry.FAMILIES))
    assert sensor == registry.sensor_metrics() and variant == registry.variant_metrics()


def test_one_unit_convention():
    units = {m.unit for m in registry.METRICS.values()}
    # angles in degrees and distances in metres (EN 17037 view out), lighting energy per
    # floor area extend the set
    assert units <= {"1", "%", "h", "lx", "lx·h", "deg", "m", "kWh/m²"}
    # CONTRACT.md §3: DA and UDI fractions 0–1, sDA / ASE / daylight factor in %
    for name in ("daylight_autonomy", "udi_low", "udi_supplementary", "udi_autonomous",
                 "udi_high", "udi_useful_mean"):
        assert registry.METRICS[name].unit == "1" and registry.METRICS[name].share
    for name in ("sda", "ase", "daylight_factor", "daylight_factor_mean"):
        assert registry.METRICS[name].unit == "%" and not registry.METRICS[name].share
    assert registry.display_unit("udi_useful_mean") == "0–1"
    assert registry.display_unit("en17037_level") == "0–3"
    for name in registry.LEVEL_METRICS:  # EN 17037 levels: 0 none … 3 high
        assert registry.METRICS[name].dtype == "int8" and registry.display_unit(name) == "0–3"
    # lighting energy per floor area and its saving (a share of energy, not of time)
    assert registry.METRICS["lighting_energy"].unit == "kWh/m²"
    assert not registry.METRICS["lighting_saving"].share


def test_opt_in_families_leave_the_default_metrics_alone():
    # a study without `metrics:` computes what it always did (CONTRACT.md §1)
    assert registry.DEFAULT_FAMILIES == ("daylight_factor", "daylight_autonomy", "udi",
                                         "sda_ase", "en17037")
    assert set(registry.DEFAULT_FAMILIES) < set(registry.FAMILIES)
    assert list(config.Study.model_fields["metrics"].default) == list(registry.DEFAULT_FAMILIES)


def test_labels_follow_the_study_thresholds():
    assert registry.label("sda") == "spatial daylight autonomy sDA 300 lx / 50 %"
    opts = {"sda_illuminance": 500, "sda_time_percent": 75, "daylight_autonomy": 250,
            "udi_edges": [150, 400, 2500], "sun_threshold": 1200, "ase_hours_limit": 100}
    assert registry.label("sda", opts) == "spatial daylight autonomy sDA 500 lx / 75 %"
    assert registry.label("ase", opts) == "annual sunlight exposure ASE 1200 lx / 100 h"
    assert registry.label("daylight_autonomy", opts) == "daylight autonomy 250 lx"
    assert registry.label("udi_useful_mean", opts) == "useful daylight (150–2500 lx), grid mean"
    assert "1200 lx" in registry.long_name("direct_sun_hours", opts)
    # a store written before the rename keeps the former spellings in its study text
    assert registry.label("ase", {"ase_illuminance": 900, "ase_hours": 50}) == (
        "annual sunlight exposure ASE 900 lx / 50 h")
    # the report's notes follow them too
    notes = report.NOTES.format(**registry.thresholds(opts))
    assert "250 lx (the study" in notes and "more than 100 hours" in notes


def test_metric_params_from_study_options():
    # sda_time_percent is a percentage in the study file, a share in the kernel
    p = registry.metric_params(
        {"daylight_autonomy": 500, "sda_time_percent": 75, "sun_threshold": 1200,
         "ase_hours_limit": 100},
        step_minutes=15,
    )
    assert (p.da_threshold, p.sda_time_fraction, p.sun_threshold, p.ase_hours_limit) == (
        500.0, 0.75, 1200.0, 100.0)
    assert p.step_hours == 0.25
    # the study's defaults are the kernel's defaults
    assert registry.metric_params(MetricOptions().model_dump(), 60) == MetricParams()


def test_former_option_spellings_warn_and_map():
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        opts = MetricOptions.model_validate(
            {"ase_illuminance": 1200, "ase_hours": 100, "sda_time_fraction": 60})
    assert [str(w.message).split(" is now")[0] for w in caught
            if w.category is FutureWarning] == [
        "metric_options: 'ase_illuminance'", "metric_options: 'ase_hours'",
        "metric_options: 'sda_time_fraction'"]
    assert (opts.sun_threshold, opts.ase_hours_limit, opts.sda_time_percent) == (1200, 100, 60)
    with pytest.raises(ValueError, match="give 'sun_threshold' only"):
        registry.renamed_options({"ase_illuminance": 1, "sun_threshold": 2})


def test_unknown_family_is_refused():
    with pytest.raises(ValueError, match="unknown metric family 'overheating'"):
        registry.store_variables(["overheating"])
