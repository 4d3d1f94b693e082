"""Expansion and planning at sweep scale: the lazy path equals the eager reference.

:func:`sweep.expand.expand` hashes ids in bulk from a canonical template and
resolves one study per block combination; :func:`sweep.expand.expand_eager`
validates one study per variant. They must agree exactly (ids, labels, axis
values, resolved studies), and the plan made on axis codes must group, order
and place every variant as the per-variant rules say.
"""

from __future__ import annotations

import dataclasses
import hashlib
import shutil
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest
from conftest import SEALED_ROOM, TINY_COMPUTE, TMY3_GREENSBORO, TMY3_SAND_POINT

from luxsweep.sweep import expand as expand_module
from luxsweep.sweep import plan as plan_module
from luxsweep.sweep.config import canonical_json, load_study
from luxsweep.sweep.errors import StudyFileError
from luxsweep.sweep.expand import Variants, expand, expand_eager, study_hash
from luxsweep.sweep.plan import (
    _series_params,
    build_geometry,
    make_plan,
    order_by_task,
)

BASE = textwrap.dedent(
    """\
    name: tallowmere-scale
    climates:
      coastal: climates/coastal.csv
      inland: climates/inland.csv
    room:
      width: 3.0
      depth: 3.0
      height: 2.7
      reflectance: {floor: 0.2, walls: 0.5, ceiling: 0.7}
      windows:
        - {wall: front, width: 1.5, sill: 0.9, head: 2.1, offset: 0.0, glazing: main}
        - {wall: left, width: 1.0, sill: 1.0, head: 2.0, glazing: side}
    glazings:
      main: {transmittance: 0.7, panes: 2}
      side: {transmittance: 0.6, panes: 1}
    grid: {height: 0.8, spacing: 1.0, margin: 0.5}
    occupancy: {start: "08:00", end: "18:00", days: weekdays}
    compute: COMPUTE
    """
).replace("COMPUTE", canonical_json(TINY_COMPUTE))

VARIED = {
    # the usual axes, a zipped group and exclusions
    "factorial": """\
        vary:
          orientation: [90, 180, 270]
          climate: [coastal, inland]
          glazings.main.transmittance: [0.7, 0.5]
          room.windows.0.width: [1.2, 1.8]
        vary_together:
          - room.windows.1.sill: [0.9, 1.1]
            glazings.side.transmittance: [0.6, 0.4]
        exclude:
          - {orientation: 270, climate: inland}
          - {room.windows.0.width: 1.8, glazings.main.transmittance: 0.5}
        """,
    # whole items and lists, nested keys, series settings, several sets of the same block
    "lists": """\
        vary:
          room.windows.0: [{wall: front, width: 1.5, sill: 0.9, head: 2.1, glazing: main},
                           {wall: back, width: 1.0, sill: 0.8, head: 2.2, glazing: main}]
          room.reflectance.walls: [0.5, 0.6]
          glazings.side: [{transmittance: 0.6, panes: 1},
                          {transmittance: 0.3, panes: 2, shaded_transmittance: 0.1}]
          occupancy.start: ["07:00", "08:00"]
          metric_options.daylight_autonomy: [300, 500]
          grid.spacing: [1.0, 0.75]
        """,
    # no vary at all
    "base": "",
}


def write(folder: Path, text: str) -> Path:
    (folder / "climates").mkdir(parents=True, exist_ok=True)
    shutil.copyfile(TMY3_GREENSBORO, folder / "climates" / "coastal.csv")
    shutil.copyfile(TMY3_SAND_POINT, folder / "climates" / "inland.csv")
    path = folder / "study.yaml"
    path.write_text(text)
    return path


def study_text(case: str) -> str:
    return BASE + textwrap.dedent(VARIED[case])


MESH = textwrap.dedent(
    """\
    name: tallowmere-mesh
    climates:
      coastal: climates/coastal.csv
      inland: climates/inland.csv
    mesh: room.obj
    materials:
      floor: {reflectance: 0.2}
      walls: {reflectance: 0.5}
      ceiling: {reflectance: 0.7}
      glass: {glazing: main}
    glazings:
      main: {transmittance: 0.70, panes: 2}
    grid: {floors: [floor], spacing: 0.5}
    vary:
      mesh: [room.obj, other/room.obj]
      materials.walls.reflectance: [0.5, 0.4]
      orientation: [0, 180]
      glazings.main.transmittance: [0.7, 0.4]
    """
)


def write_mesh(folder: Path) -> Path:
    path = write(folder, MESH)
    (folder / "other").mkdir()
    (folder / "room.obj").write_text(SEALED_ROOM)
    (folder / "other" / "room.obj").write_text(SEALED_ROOM.replace("v 2 1.5 2", "v 2 1.5 2.2"))
    return path


def same_variants(lazy: Variants, eager: list) -> None:
    assert len(lazy) == len(eager)
    assert lazy.ids.tolist() == [v.variant_id for v in eager]
    assert lazy.labels() == [v.label for v in eager]
    for path in eager[0].axes:
        assert lazy.axis_values(path) == [v.axes[path] for v in eager]
    for got, want in zip(lazy, eager, strict=True):
        assert got.index == want.index and got.variant_id == want.variant_id
        assert got.study == want.study and got.params == want.params
        assert got.axes == want.axes and got.label == want.label


@pytest.mark.parametrize("case", sorted(VARIED))
def test_lazy_expansion_equals_eager(tmp_path, case):
    loaded = load_study(write(tmp_path, study_text(case)))
    lazy, eager = expand(loaded), expand_eager(loaded)
    same_variants(lazy, eager)
    assert study_hash(loaded, lazy) == study_hash(loaded, eager)
    # the id is the sha256 of the canonical JSON of the resolved parameters
    v = lazy[-1]
    assert v.variant_id == hashlib.sha256(canonical_json(v.params).encode()).hexdigest()[:16]


def test_lazy_expansion_equals_eager_for_mesh_studies(tmp_path):
    loaded = load_study(write_mesh(tmp_path))
    same_variants(expand(loaded), expand_eager(loaded))


def test_reordered_and_sliced_variants_keep_their_ids(tmp_path):
    loaded = load_study(write(tmp_path, study_text("factorial")))
    lazy = expand(loaded)
    order = np.arange(len(lazy))[::-1]
    back = lazy.reordered(order)
    assert back.ids.tolist() == lazy.ids.tolist()[::-1]
    assert back[0].variant_id == lazy[-1].variant_id and back[0].index == 0
    assert [v.variant_id for v in lazy[2:5]] == lazy.ids.tolist()[2:5]


def eager_plan_reference(loaded):
    """Per-variant planning rules on the eager variants: key, task label, store order."""
    from luxsweep.kernels.coefficients import coefficient_key

    variants = expand_eager(loaded)
    keys, built = [], {}
    for v in variants:
        doc = canonical_json(plan_module._geometry_inputs(v.study))
        if doc not in built:
            geometry, pts, _ = build_geometry(v.study)
            built[doc] = coefficient_key(geometry, pts, plan_module.settings_of(v.study))
        keys.append(built[doc])
    groups = [f"{k} {v.climate} {canonical_json(_series_params(v.study))}"
              for k, v in zip(keys, variants, strict=True)]
    order = order_by_task(groups)
    return [variants[j] for j in order], [keys[j] for j in order]


@pytest.mark.parametrize("case", ["factorial", "lists", "mesh"])
def test_plan_on_codes_places_every_variant_as_the_per_variant_rules(tmp_path, case):
    path = write_mesh(tmp_path) if case == "mesh" else write(tmp_path, study_text(case))
    loaded = load_study(path)
    plan = make_plan(loaded, None, read_climates=False)
    variants, keys = eager_plan_reference(loaded)
    assert plan.variant_ids() == [v.variant_id for v in variants]  # same store order
    assert list(plan.keys) == keys
    assert plan.study_hash == study_hash(loaded, variants)
    seen = set()
    for task in plan.tasks:
        for (vi, oi, ri), vid in zip(task.members, task.variant_ids, strict=True):
            v = variants[vi]
            assert vid == v.variant_id and plan.keys[vi] == task.key
            assert v.climate == task.climate and v.orientation == task.orientations[oi]
            g = v.study.glazings
            n = len(task.glazing_sets)
            row = task.rows[ri]
            for s, tau, closed in zip(task.glazing_sets, row[:n], row[n:], strict=True):
                assert tau == g[s].transmittance
                assert closed == (g[s].shaded_transmittance if g[s].shaded_transmittance
                                  is not None else g[s].transmittance)
            seen.add(vi)
        # the task's study is its first member's
        assert task.study == variants[task.members[0][0]].study
    assert seen == set(range(len(variants)))
    for job in plan.jobs.values():
        assert list(job.variants) == [i for i, k in enumerate(keys) if k == job.key]
    for i in (0, len(variants) - 1):
        assert len(plan.sensors[i]) == len(plan.layouts[i].sensor_space)


def check_plan(loaded) -> None:
    plan = make_plan(loaded, None, read_climates=False)
    variants, keys = eager_plan_reference(loaded)
    assert plan.variant_ids() == [v.variant_id for v in variants]
    assert list(plan.keys) == keys
    for task in plan.tasks:
        for vi, oi, ri in task.members:
            v = variants[vi]
            assert plan.keys[vi] == task.key and v.climate == task.climate
            assert v.orientation == task.orientations[oi]
            assert task.rows[ri][0] == v.study.glazings["main"].transmittance


def test_axes_whose_role_depends_on_other_axes_are_planned_variant_by_variant(
        tmp_path, monkeypatch, caplog):
    """When an axis changes the geometry only in some combinations (as a glazing set
    on an internal opening does), the plan must notice and still group exactly."""
    loaded = load_study(write(tmp_path, study_text("factorial")))
    plain, plain_settings = plan_module._geometry_inputs, plan_module.settings_of

    def baked(study):  # the set bakes into the coefficients in narrow windows only
        return study.room.windows[0].width < 1.5

    def interacting(study):
        doc = plain(study)
        if baked(study):
            doc["tau"] = study.glazings["main"].transmittance
        return doc

    def settings(study):  # so that the coefficient key follows τ there
        out = plain_settings(study)
        if baked(study):
            out = dataclasses.replace(out, seed=round(100 * study.glazings["main"].transmittance))
        return out

    monkeypatch.setattr(plan_module, "_geometry_inputs", interacting)
    monkeypatch.setattr(plan_module, "settings_of", settings)
    with caplog.at_level("WARNING", logger="luxsweep"):
        check_plan(loaded)
    assert "variant by variant" in caplog.text
    plan = make_plan(loaded, None, read_climates=False)
    # width 1.8 (τ 0.5 excluded) and width 1.2 at τ 0.7 and 0.5, each with two side sills
    assert len(plan.jobs) == 6


def test_a_combination_of_valid_values_that_is_not_valid_is_refused(tmp_path):
    """Each value is valid alone (checked when loading), the pair is not: the lazy
    expansion validates each combination of a block once and names it; an
    exclusion of that pair removes the problem."""
    vary = textwrap.dedent(
        """        vary:
          room.windows.0.sill: [0.9, 2.0]
          room.windows.0.head: [2.1, 1.5]
          orientation: [0, 90]
        """)
    loaded = load_study(write(tmp_path / "a", BASE + vary))
    with pytest.raises(StudyFileError, match=r"combination room\.windows\.0\.sill=2 "
                                             r"room\.windows\.0\.head=1\.5 is not valid"):
        expand(loaded)
    excluded = BASE + vary + "exclude:\n  - {room.windows.0.sill: 2.0, room.windows.0.head: 1.5}\n"
    loaded = load_study(write(tmp_path / "b", excluded))
    same_variants(expand(loaded), expand_eager(loaded))
    check_plan(loaded)


def test_a_varied_item_and_a_key_inside_it_are_refused(tmp_path):
    text = BASE + textwrap.dedent(
        """\
        vary:
          room.windows.0: [{wall: front, width: 1.5, sill: 0.9, head: 2.1, glazing: main}]
          room.windows.0.offset: [0.0, 0.3]
        """)
    with pytest.raises(StudyFileError, match=r"'room\.windows\.0\.offset' lies inside "
                                             r"'room\.windows\.0'"):
        load_study(write(tmp_path, text))


def test_a_varied_item_and_a_key_inside_it_exit_2(tmp_path, cli):
    text = BASE + textwrap.dedent(
        """\
        vary_together:
          - room.windows.0: [{wall: front, width: 1.5, sill: 0.9, head: 2.1, glazing: main},
                             {wall: front, width: 1.0, sill: 0.9, head: 2.1, glazing: main}]
            room.windows.0.offset: [0.0, 0.3]
        """)
    result = cli("check", str(write(tmp_path, text)))
    assert result.code == 2 and "lies inside" in result.err and "Traceback" not in result.err


@pytest.mark.slow
def test_a_million_variants_expand_without_an_object_per_variant(tmp_path, monkeypatch):
    """1,000,000 variants: the studies validated are counted (one per axis value
    and per block combination, not per variant); loose time bound for a loaded
    2-core machine."""
    text = BASE + textwrap.dedent(
        """\
        vary:
          orientation: ORIENTATIONS
          climate: [coastal, inland]
          glazings.main.transmittance: TAUS
          room.windows.0.width: [1.0, 1.1, 1.2, 1.3, 1.4, 1.5, 1.6, 1.7, 1.8, 1.9]
          room.windows.0.sill: [0.5, 0.6, 0.7, 0.8, 0.9, 1.0, 1.1, 1.2, 1.3, 1.4]
        """).replace("ORIENTATIONS", str([round(3.6 * k, 1) for k in range(100)])).replace(
        "TAUS", str([round(0.3 + 0.01 * k, 2) for k in range(50)]))
    loaded = load_study(write(tmp_path, text))
    calls = []
    substitute = expand_module._substitute

    def counted(*args, **kwargs):
        calls.append(1)
        return substitute(*args, **kwargs)

    monkeypatch.setattr(expand_module, "_substitute", counted)
    t0 = time.perf_counter()
    variants = expand(loaded)
    seconds = time.perf_counter() - t0
    assert len(variants) == 100 * 2 * 50 * 10 * 10
    assert len(calls) < 1_000  # 172 axis values + 100 window combinations + checks
    assert seconds < 120
    ids = variants.ids
    assert len(np.unique(ids)) == len(ids)
    # any variant, built alone, has the id computed in bulk (indexing checks it too)
    for i in (1, 123_457, 999_998):
        v = variants[i]
        assert v.variant_id == ids[i] == hashlib.sha256(
            canonical_json(v.params).encode()).hexdigest()[:16]
