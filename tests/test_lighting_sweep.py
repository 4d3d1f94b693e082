"""Electric lighting with daylight-linked control through the sweep (study file, series
stage, store): the stored energy of every space equals a recount from the stored
illuminance series with the lighting kernel, and the building totals follow from the
spaces' results.

The building is real (two spaces, real coefficients, a real TMY3 year); nothing is
mocked. Definitions checked, each named beside its assertion:
- annual energy W = p · Σ_t F_P(E_t) Δt / 1000 over occupied steps (EN 15193-1:2017 builds
  its lighting energy indicator the same way, from memory);
- the operable shading closes where more than 2 % of a space's sensors get more than
  1000 lx of direct sun (IES LM-83-12), and the control then reads the shaded daylight;
- without control the lights burn at full power for every occupied hour (common practice);
- the building energy is the grid-area-weighted mean of the spaces' (CONTRACT.md §3 weights
  building means by grid area) and its saving that of the total energy.
"""

from __future__ import annotations

import shutil

import numpy as np
import pytest
import xarray as xr
from conftest import TINY_COMPUTE, TMY3_GREENSBORO, run_plan_in_process

from luxsweep.kernels.lighting import annual_energy, power_fraction

STUDY = """\
name: ferncombe-wing
climates:
  coastal: climates/coastal.csv
spaces:
  - name: east
    origin: [0.0, 0.0, 0.0]
    width: 4.0
    depth: 3.0
    height: 2.7
    windows:
      - {{wall: front, width: 2.0, sill: 0.9, head: 2.1, glazing: main}}
    lighting: {{control: on_off, control_point: [0.6, 2.4]}}
  - name: west
    origin: [4.0, 0.0, 0.0]
    width: 3.0
    depth: 3.0
    height: 2.7
    windows:
      - {{wall: front, width: 1.2, sill: 0.9, head: 2.1, glazing: main}}
glazings:
  main: {{transmittance: 0.7, panes: 2, shaded_transmittance: 0.15}}
grid: {{height: 0.8, spacing: 1.0, margin: 0.5}}
occupancy: {{start: "08:00", end: "18:00", days: weekdays}}
timestep: 60
compute: {compute}
lighting: {{power_density: 8.0, target: 300, control: dimming, min_power: 0.2}}
metrics: [daylight_factor, lighting]
store_series: true
vary:
  glazings.main.transmittance: [0.7, 0.4]
  lighting.target: [300, 500]
"""


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    """The study run in this process (the series tasks as the workers run them)."""
    import json

    from luxsweep.sweep.cache import CoefficientCache
    from luxsweep.sweep.config import load_study
    from luxsweep.sweep.plan import make_plan

    folder = tmp_path_factory.mktemp("lighting")
    (folder / "climates").mkdir()
    shutil.copyfile(TMY3_GREENSBORO, folder / "climates" / "coastal.csv")
    study = folder / "study.yaml"
    study.write_text(STUDY.format(compute=json.dumps(TINY_COMPUTE)))
    cache = CoefficientCache(folder / "cache")
    plan = make_plan(load_study(study), cache)
    results = folder / "results.zarr"
    run_plan_in_process(plan, results, cache.root)
    return plan, xr.open_zarr(results)


def test_varying_lighting_shares_the_coefficients(store):
    plan, ds = store
    # lighting is not geometry: one coefficient set, a series task per target
    assert len(plan.jobs) == 1 and len(plan.tasks) == 2
    assert ds.done.values.all() and ds.sizes["variant"] == 4
    for name in ("lighting_energy", "lighting_saving"):
        assert ds[name].dims == ("variant",)
        assert ds[f"space_{name}"].dims == ("variant", "space")
    assert ds.lighting_energy.attrs["units"] == "kWh/m²"
    assert ds.space_lighting_saving.attrs["units"] == "%"


def _recount(ds, v, k, sensors, control, target, min_power, min_light, tau, tau_shut):
    """Full-power hours of space k of variant v from the stored series (1 h steps)."""
    e = ds.illuminance.values[v][sensors].astype(np.float64)  # (n_k, n_occupied)
    d = ds.direct_sun_illuminance.values[v][sensors]
    # IES LM-83-12: closed where more than 2 % of the space's sensors get > 1000 lx direct sun
    closed = np.count_nonzero(d > 1000.0, axis=0) > 0.02 * len(sensors)
    c = control
    daylight = np.where(closed, e[c] * tau_shut / tau, e[c])
    return power_fraction(daylight, target, "dimming" if min_power else "on_off",
                          min_power or 0.1, min_light).sum()


def test_store_equals_a_recount_from_the_stored_series(store):
    _, ds = store
    own = np.array([str(s) for s in ds.sensor_space.values])
    x, y = ds.x.values, ds.y.values
    df = ds.daylight_factor.values
    n_occ = ds.sizes["time"]
    # a TMY year of weekdays 08:00–18:00: ten occupied hours on each of about 261 days
    assert 2500 <= n_occ <= 2620
    tau = ds["glazings.main.transmittance"].values
    target = ds["lighting.target"].values
    area = ds.space_area.values
    full = annual_energy(n_occ, 8.0)  # no control: full power every occupied hour [kWh/m²]
    for v in range(4):
        energy = []
        for k, name in enumerate(str(s) for s in ds.space.values):
            members = np.flatnonzero(own == name)
            if name == "east":  # on/off at the sensor nearest (0.6, 2.4) in its own frame
                c = int(np.argmin((x[members] - 0.6) ** 2 + (y[members] - 2.4) ** 2))
                hours = _recount(ds, v, k, members, c, target[v], None, 0.1, tau[v], 0.15)
            else:  # dimming (P_min 0.2, L_min 0.1) at the sensor of the median daylight factor
                c = int(np.argsort(df[v, members], kind="stable")[(members.size - 1) // 2])
                hours = _recount(ds, v, k, members, c, target[v], 0.2, 0.1, tau[v], 0.15)
            want = annual_energy(hours, 8.0)
            # float32 store; the shaded series is recomputed here as τ_shut/τ · E (rounding)
            np.testing.assert_allclose(ds.space_lighting_energy.values[v, k], want, rtol=1e-4)
            np.testing.assert_allclose(ds.space_lighting_saving.values[v, k],
                                       100.0 * (1.0 - want / full), rtol=1e-4, atol=1e-3)
            energy.append(want)
        w = area[v] / area[v].sum()
        np.testing.assert_allclose(ds.lighting_energy.values[v], w @ energy, rtol=1e-4)
        np.testing.assert_allclose(ds.lighting_saving.values[v],
                                   100.0 * (1.0 - (w @ energy) / full), rtol=1e-4)
    # not vacuous: daylight saves energy, less at the higher target and the darker glass
    e = ds.space_lighting_energy.values
    assert np.all((e > 0.05 * full) & (e < 0.95 * full))
    pairs = zip(tau, target, strict=True)
    by = {(round(float(t), 2), float(g)): i for i, (t, g) in enumerate(pairs)}
    assert e[by[(0.4, 300.0)]].sum() > e[by[(0.7, 300.0)]].sum()
    assert e[by[(0.7, 500.0)]].sum() > e[by[(0.7, 300.0)]].sum()


def test_rank_and_report_read_the_lighting_results(store):
    from luxsweep.sweep.rank import rank_table
    from luxsweep.sweep.report import build_report

    _, ds = store
    saving = ds.space_lighting_saving.values
    bound = float(np.sort(saving.min(axis=1))[-2])  # two variants reach it in every space
    table = rank_table(ds, {"require": [{"metric": "lighting_saving", "at_least": bound,
                                         "spaces": "all"}],
                            "prefer": [{"metric": "lighting_energy", "goal": "min"}]})
    passing = table[table["status"] == "pass"]
    assert set(passing["variant"]) == set(np.flatnonzero(saving.min(axis=1) >= bound))
    assert len(passing) == 2
    # the one objective: less building energy ranks first among the passing variants
    assert list(passing["variant"]) == list(
        passing["variant"].iloc[np.argsort(ds.lighting_energy.values[passing["variant"]])])
    page = build_report(ds)
    assert "Electric lighting with daylight control" in page
    assert "lighting energy [kWh/m²]" in page and "lighting saved" in page
    for name in ("east", "west"):  # the per-space table of a building shows lighting too
        row = page[page.index(f"<th>{name}</th>"):]
        assert "lighting energy" in row[:row.index("</tr>")]
