"""Results per space and for the building (CONTRACT.md §3; kernels/metrics.py, sweep store,
rank and report).

Definitions checked, each named beside its assertion:
- a space is its own grid: its sDA, ASE (IES LM-83-12), LM-83 shading group and EN 17037
  reference plane (EN 17037:2018) are those of its sensors alone;
- the building's sDA and ASE pool the sensors of all spaces (IES LM-83-12 takes the whole
  analysis area), its means are weighted by grid area, its EN 17037 level is the lowest
  space's (CONTRACT.md §3);
- a study of one space keeps every result it had before spaces existed.
The building in the store tests is a real one (kernels.geometry.parametric_building, real
coefficients, a real TMY3 year); nothing is mocked.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import xarray as xr
from conftest import run_plan_in_process

from luxsweep.kernels.metrics import (
    MetricParams,
    StepMasks,
    accumulate,
    accumulate_dark,
    area_weighted,
    finalize,
)

P = MetricParams()
GRID_RESULTS = ("sda", "ase", "udi_useful_mean", "daylight_autonomy_mean", "shading_hours",
                "en17037_level")


def _masks(n, seed=3):
    rng = np.random.default_rng(seed)
    return StepMasks(rng.random(n) < 0.5, rng.random(n) < 0.55, rng.random(n) < 0.6)


def _year(seed=5, batch=(2,), n_sensors=30, n_steps=600, sun=0.35):
    """Integer lux (float sums exact in any order) with sun on a share ``sun`` of the values."""
    rng = np.random.default_rng(seed)
    total = np.floor(rng.lognormal(6.0, 1.2, size=(*batch, n_sensors, n_steps)))
    total = total.astype(np.float32)
    direct = np.where(rng.random(total.shape) < sun, total, 0).astype(np.float32)
    shaded = np.floor(total * 0.3).astype(np.float32)
    return total, direct, shaded


# --------------------------------------------------------------------------- kernel


@pytest.mark.parametrize("order", ["runs", "interleaved"])
@pytest.mark.parametrize("scaled", [False, True])
def test_each_space_is_its_own_grid(order, scaled):
    # Definition (IES LM-83-12; EN 17037:2018): the sDA, ASE, shading rule and EN 17037 plane
    # of a space are those of its own sensors. Folding the building with `space` must give,
    # for each space, exactly what folding that space's sensors alone gives (integer counts:
    # exact; float means over the same values in the same order: exact).
    # sun on few sensors at a time, so that the 2 % rule of a space (more than 1 of 50,
    # 0 of 40 or 30 sensors) and of the whole building (more than 2 of 120) differ
    total, direct, shaded = _year(n_sensors=120, sun=0.03)
    n = total.shape[-2]
    space = np.repeat([0, 1, 2], [50, 40, 30]) if order == "runs" else np.arange(n) % 3
    m = _masks(total.shape[-1])
    p = MetricParams(ase_hours_limit=2.0)
    tau = np.array([0.7, 0.4], np.float32)
    kw = (dict(transmittance=tau, shaded_transmittance=0.3 * tau) if scaled
          else dict(total_shaded=shaded))
    area = np.array([50.0, 40.0, 30.0])
    got = finalize(accumulate(None, total, direct, m, p, space=space, **kw), p, space, area)
    for k in range(3):
        alone = finalize(accumulate(None, total[..., space == k, :], direct[..., space == k, :],
                                    m, p, **({**kw, "total_shaded": shaded[..., space == k, :]}
                                             if not scaled else kw)), p)
        for name in GRID_RESULTS:
            np.testing.assert_array_equal(got[f"space_{name}"][..., k], alone[name],
                                          err_msg=f"{name}, space {k}")
        np.testing.assert_array_equal(got["sda_fraction"][..., space == k],
                                      alone["sda_fraction"], err_msg="sda_fraction")
    # the case exercises the rules (not all zero): shading closes, ASE and levels vary
    assert got["space_shading_hours"].max() > 0 and got["space_ase"].max() > 0
    # building: sDA and ASE pooled over every sensor (IES LM-83-12: one analysis area) —
    # recounted here from the per-sensor results
    sda_ok = got["sda_fraction"] >= 0.5
    np.testing.assert_array_equal(got["sda"], 100.0 * sda_ok.mean(axis=-1))
    np.testing.assert_array_equal(got["ase"], 100.0 * (got["ase_hours"] > 2.0).mean(axis=-1))
    # means weighted by grid area (CONTRACT.md §3), the level of the lowest space
    w = area / area.sum()
    useful = got["udi_supplementary"] + got["udi_autonomous"]
    want = sum(w[k] * useful[..., space == k].mean(axis=-1) for k in range(3))
    np.testing.assert_allclose(got["udi_useful_mean"], want, rtol=1e-14)
    np.testing.assert_array_equal(got["en17037_level"], got["space_en17037_level"].min(-1))


def test_night_steps_count_per_space_as_zero_illuminance():
    # accumulate_dark is accumulate with zero illuminance (module contract), space axis too
    total, direct, _ = _year(n_steps=50)
    space = np.repeat([0, 1], [18, 12])
    m = _masks(50)
    lit = accumulate(None, total, direct, m, P, space=space)
    a = accumulate_dark(lit, _masks(20, seed=9), P, (2,), 30, n_spaces=2)
    zeros = np.zeros((2, 30, 20), np.float32)
    b = accumulate(lit, zeros, zeros, _masks(20, seed=9), P, space=space)
    for f in dataclasses.fields(a):
        np.testing.assert_array_equal(getattr(a, f.name), getattr(b, f.name), err_msg=f.name)


def test_one_space_gives_the_results_of_a_grid_without_spaces():
    # A room study is a building of one space (CONTRACT.md §1b): every result it had before
    # spaces existed is unchanged bit for bit, and its space_* results equal them.
    total, direct, shaded = _year(batch=(3,))
    m = _masks(total.shape[-1])
    one = np.zeros(total.shape[-2], np.int32)
    plain = finalize(accumulate(None, total, direct, m, P, shaded), P)
    spaced = finalize(accumulate(None, total, direct, m, P, shaded, space=one), P, one,
                      np.array([np.nan]))  # unknown area: one space needs none
    assert set(spaced) == set(plain) | {f"space_{n}" for n in GRID_RESULTS}
    for name, value in plain.items():
        assert spaced[name].dtype == value.dtype, name
        np.testing.assert_array_equal(spaced[name], value, err_msg=name)
        if name in GRID_RESULTS:
            np.testing.assert_array_equal(spaced[f"space_{name}"][..., 0], value, err_msg=name)


def test_per_space_results_are_the_registrys():
    # every per-variant result the kernels finalize has its space_ form, and no other
    from luxsweep.sweep.registry import METRICS, space_metrics

    total, direct, _ = _year(n_steps=40)
    space = np.repeat([0, 1], [20, 10])
    out = finalize(accumulate(None, total, direct, _masks(40), P, space=space), P, space,
                   np.array([2.0, 1.0]))
    want = {f"space_{m}" for m in space_metrics() if METRICS[m].source == "finalize"}
    assert {k for k in out if k.startswith("space_")} == want


def test_building_hand_example_pooled_weighted_lowest():
    # Two spaces, a whole year of steady light, hand-computable:
    # A: 6 sensors at 1000 lx, B: 4 sensors at 150 lx, every step occupied, analysed, daylit.
    # sDA_300/50% (IES LM-83-12): A 100 %, B 0 %; building pooled over sensors 6/10 = 60 %
    # (area weighting with A 10 m², B 30 m² would give 25 %: it must not).
    # UDI useful 100–3000 lx (Nabil & Mardaljevic 2005): A 1, B 1. DA 300 lx (Reinhart &
    # Walkenhorst 2001): A 1, B 0 → building 10/40·1 + 30/40·0 = 0.25 (area weighted).
    # EN 17037:2018 Table A.1: A meets 750/500 lx (level 3); B meets 100 lx over the whole
    # plane but not 300 lx target → level 0 at B (target 300 lx for minimum level) → building 0.
    e = np.concatenate([np.full((6, 100), 1000.0), np.full((4, 100), 150.0)]).astype(np.float32)
    space = np.repeat([0, 1], [6, 4])
    m = StepMasks(np.ones(100, bool), np.ones(100, bool), np.ones(100, bool))
    out = finalize(accumulate(None, e, np.zeros_like(e), m, P, space=space), P, space,
                   np.array([10.0, 30.0]))
    np.testing.assert_array_equal(out["space_sda"], [100.0, 0.0])
    assert out["sda"] == 60.0
    np.testing.assert_array_equal(out["space_daylight_autonomy_mean"], [1.0, 0.0])
    assert out["daylight_autonomy_mean"] == 0.25
    np.testing.assert_array_equal(out["space_udi_useful_mean"], [1.0, 1.0])
    assert out["udi_useful_mean"] == 1.0
    np.testing.assert_array_equal(out["space_en17037_level"], [3, 0])
    assert out["en17037_level"] == 0


def test_area_weights_need_areas_for_several_spaces():
    # one space: its value whatever the area (w = 1); several: each needs a positive area
    np.testing.assert_array_equal(area_weighted(np.array([[0.3]]), np.array([np.nan])), [0.3])
    with pytest.raises(ValueError, match="positive grid area"):
        area_weighted(np.array([0.3, 0.5]), np.array([1.0, np.nan]))
    # grid-area weighting (CONTRACT.md §3): 3·0.2 + 1·0.6 over 4 m² = 0.3
    assert area_weighted(np.array([0.2, 0.6]), np.array([3.0, 1.0])) == pytest.approx(0.3,
                                                                                      rel=1e-15)


# --------------------------------------------------------------------------- store


def _space(name, origin, width, depth, wall, *more):
    """A space of the test building: 2.7 m high, one 1.5 m window on ``wall`` (and the
    windows ``more``)."""
    return {"name": name, "origin": origin, "width": width, "depth": depth, "height": 2.7,
            "thickness": 0.0, "reflectance": {"floor": 0.2, "walls": 0.5, "ceiling": 0.7},
            "windows": [{"wall": wall, "width": 1.5, "sill": 0.9, "head": 2.1,
                         "glazing": "main"}, *more]}


# a glazed opening in the wall between the two spaces (north covers it): an internal opening
INNER = {"wall": "back", "width": 1.0, "sill": 0.9, "head": 2.1, "offset": -0.5,
         "glazing": "inner"}


@pytest.fixture(scope="module")
def stores(tmp_path_factory):
    """The tiny room study run as it is, and the same study on a building of two spaces:
    a 4 × 3 m space `south` with a front window and a 3 × 2 m space `north` touching its
    back wall with a back window (kernels.geometry.parametric_building, real coefficients
    and a real TMY3 year). 4 variants each (orientation 90/180 × τ 0.7/0.4)."""
    from conftest import write_tiny_study

    from luxsweep.kernels.coefficients import coefficient_key
    from luxsweep.kernels.geometry import parametric_building, sensor_grid
    from luxsweep.sweep.cache import CoefficientCache
    from luxsweep.sweep.config import load_study
    from luxsweep.sweep.plan import make_plan
    from luxsweep.sweep.spaces import SpaceLayout

    folder = tmp_path_factory.mktemp("spaces")
    study = write_tiny_study(folder / "study", name="two-room-wing", climates=("coastal",))
    cache = CoefficientCache(folder / "cache")
    plan = make_plan(load_study(study), cache)
    room = folder / "room.zarr"
    run_plan_in_process(plan, room, cache.root)

    spaces = [_space("south", (0.0, 0.0, 0.0), 4.0, 3.0, "front", INNER),
              _space("north", (0.0, 3.0, 0.0), 3.0, 2.0, "back")]
    geometry = parametric_building(spaces, {"main": 2, "inner": 1}, {"inner": 0.8})
    assert geometry.internal_sets == ("inner",) or "inner" in geometry.internal_sets
    grids = []
    for s in spaces:
        g = sensor_grid(s["width"], s["depth"], 0.8, 1.0, 0.5)
        g[:, :3] += np.asarray(s["origin"])
        grids.append(g)
    sensors = np.concatenate(grids)
    layout = SpaceLayout(names=("south", "north"),
                         sensor_space=np.repeat([0, 1], [len(g) for g in grids]),
                         area=np.array([s["width"] * s["depth"] for s in spaces]))
    room_job = next(iter(plan.jobs.values()))
    key = coefficient_key(geometry, sensors, room_job.settings)
    job = dataclasses.replace(room_job, key=key, geometry=geometry, sensors=sensors,
                              layout=layout, cached=False)
    n = len(plan.variants)
    building_plan = dataclasses.replace(
        plan, sensors=[sensors] * n, layouts=[layout] * n, keys=[key] * n, jobs={key: job},
        tasks=[dataclasses.replace(t, key=key, layout=layout) for t in plan.tasks])
    building = folder / "building.zarr"
    run_plan_in_process(building_plan, building, cache.root)
    # the study text the store keeps, as a study of these spaces would read (CONTRACT.md §1b)
    import yaml

    tree = yaml.safe_load(study.read_text())
    tree.pop("room")
    tree["spaces"] = [{**s, "origin": list(s["origin"])} for s in spaces]
    tree["glazings"]["inner"] = {"transmittance": 0.8, "panes": 1}
    return {"room": xr.open_zarr(room), "building": xr.open_zarr(building), "layout": layout,
            "folder": folder, "building_text": yaml.safe_dump(tree, sort_keys=False)}


SPACE_VARIABLES = [f"space_{n}" for n in ("daylight_factor_mean", "daylight_autonomy_mean",
                                          "udi_useful_mean", "sda", "ase", "shading_hours",
                                          "en17037_level")]


def test_building_store_has_spaces_sensor_owners_and_areas(stores):
    ds, layout = stores["building"], stores["layout"]
    assert ds.done.values.all()
    assert [str(s) for s in ds.space.values] == ["south", "north"]
    assert ds.sensor_space.dims == ("sensor",)
    assert [str(s) for s in ds.sensor_space.values] == [layout.names[k]
                                                        for k in layout.sensor_space]
    np.testing.assert_array_equal(ds.space_area.values, np.tile([12.0, 6.0], (4, 1)))
    assert ds.space_area.attrs["units"] == "m²"
    for name in SPACE_VARIABLES:
        assert ds[name].dims == ("variant", "space"), name
        assert not np.isnan(ds[name].values.astype(float)).any(), name


def test_building_totals_equal_the_pooled_recount_from_the_sensors(stores):
    ds = stores["building"]
    own = np.array([str(s) for s in ds.sensor_space.values])
    names = [str(s) for s in ds.space.values]
    area = ds.space_area.values
    # sDA_300/50% and ASE_1000,250h (IES LM-83-12) pooled over the sensors of every space;
    # the stored fractions and hours are float32 of exact ratios, far from the thresholds'
    # rounding (1/3650 apart), so the recount is exact
    sda_ok = ds.sda_fraction.values >= 0.5
    over = ds.ase_hours.values > 250.0
    np.testing.assert_allclose(ds.sda.values, 100.0 * sda_ok.mean(axis=1), rtol=1e-6)
    np.testing.assert_allclose(ds.ase.values, 100.0 * over.mean(axis=1), rtol=1e-6)
    # per space: the same over the space's own sensors
    useful = ds.udi_supplementary.values.astype(float) + ds.udi_autonomous.values
    for k, name in enumerate(names):
        mine = own == name
        np.testing.assert_allclose(ds.space_sda.values[:, k], 100.0 * sda_ok[:, mine].mean(1),
                                   rtol=1e-6)
        np.testing.assert_allclose(ds.space_udi_useful_mean.values[:, k],
                                   useful[:, mine].mean(1), rtol=1e-6)  # float32 store
        np.testing.assert_allclose(ds.space_daylight_factor_mean.values[:, k],
                                   ds.daylight_factor.values[:, mine].mean(1), rtol=1e-6)
    # means weighted by grid area, EN 17037 the lowest space's level (CONTRACT.md §3)
    w = area / area.sum(axis=1, keepdims=True)
    for name in ("udi_useful_mean", "daylight_factor_mean", "daylight_autonomy_mean"):
        np.testing.assert_allclose(ds[name].values, (w * ds[f"space_{name}"].values).sum(1),
                                   rtol=1e-6, err_msg=name)
    np.testing.assert_array_equal(ds.en17037_level.values,
                                  ds.space_en17037_level.values.min(axis=1))
    # not vacuous: the north space (back window) and the south one differ
    south, north = ds.space_daylight_factor_mean.values.T
    assert np.all(np.abs(south - north) > 0.05 * np.maximum(south, north))


def test_one_room_store_keeps_its_results_and_adds_its_one_space(stores):
    # a room study is a building of one space `room` (CONTRACT.md §1b, §3)
    ds = stores["room"]
    assert dict(ds.sizes) == {"variant": 4, "sensor": 9, "space": 1}
    assert [str(s) for s in ds.space.values] == ["room"]
    assert {str(s) for s in ds.sensor_space.values} == {"room"}
    np.testing.assert_array_equal(ds.space_area.values, np.full((4, 1), 9.0))  # 3 × 3 m
    for name in SPACE_VARIABLES:
        base = name.removeprefix("space_")
        assert ds[name].dtype == ds[base].dtype
        np.testing.assert_array_equal(ds[name].values[:, 0], ds[base].values, err_msg=name)


def test_variants_with_other_grids_and_other_spaces(tmp_path):
    # Grids differ between variants (a room size varies, a space is left out): sensor_space
    # is (variant, sensor) with '' in unused slots; a space a variant lacks holds NaN, and
    # level -1 (CONTRACT.md §3 extension, documented in sweep.store)
    from luxsweep.sweep import store
    from luxsweep.sweep.spaces import SpaceLayout

    pts = [np.column_stack([np.arange(9.0), np.zeros(9), np.full(9, 0.8)]),
           np.column_stack([np.arange(6.0), np.ones(6), np.full(6, 0.8)])]
    spaces = [SpaceLayout(("hall", "studio"), np.repeat([0, 1], [5, 4]), np.array([10.0, 8.0])),
              SpaceLayout(("hall",), np.zeros(6, np.int32), np.array([12.0]))]
    layout = store.StoreLayout(
        variant_ids=["a" * 16, "b" * 16], labels=["one", "two"],
        axes={"room.width": [4.0, 3.0]}, sensors=pts,
        sensor_variables=["daylight_autonomy"], variant_variables=["sda", "en17037_level"],
        times=None, series_chunk=8, attrs={"study_hash": "x", "study": "name: x\n"},
        spaces=spaces, space_variables=["space_sda", "space_en17037_level"])
    path = tmp_path / "r.zarr"
    store.create_store(path, layout)
    store.write_variants(path, [0], {"daylight_autonomy": np.full((1, 9), 0.5)},
                         {"sda": np.array([60.0]), "en17037_level": np.array([1])},
                         space_values={"space_sda": np.array([[80.0, 35.0]]),
                                       "space_en17037_level": np.array([[2, 1]])},
                         spaces=("hall", "studio"))
    store.write_variants(path, [1], {"daylight_autonomy": np.full((1, 6), 0.4)},
                         {"sda": np.array([50.0]), "en17037_level": np.array([0])},
                         space_values={"space_sda": np.array([[50.0]]),
                                       "space_en17037_level": np.array([[0]])},
                         spaces=("hall",))
    ds = xr.open_zarr(path, consolidated=False)
    assert ds.sensor_space.dims == ("variant", "sensor")
    owners = [[str(v) for v in row] for row in ds.sensor_space.values]
    assert owners == [["hall"] * 5 + ["studio"] * 4, ["hall"] * 6 + [""] * 3]
    assert [str(v) for v in ds.space.values] == ["hall", "studio"]
    np.testing.assert_array_equal(ds.space_area.values, [[10.0, 8.0], [12.0, np.nan]])
    np.testing.assert_array_equal(ds.space_sda.values, [[80.0, 35.0], [50.0, np.nan]])
    np.testing.assert_array_equal(ds.space_en17037_level.values, [[2, 1], [0, -1]])
    assert ds.space_en17037_level.dtype == np.int8
    with pytest.raises(Exception, match="no space"):
        store.write_variants(path, [1], {}, {}, space_values={"space_sda": np.array([[1.0]])},
                             spaces=("attic",))


# --------------------------------------------------------------------------- rank


def test_rank_criteria_on_every_space_a_named_space_and_the_building(stores):
    import io

    from luxsweep.sweep.rank import parse_rank_spec, print_table, rank_table

    ds = stores["building"]
    names = [str(s) for s in ds.space.values]
    space_ase, building_ase = ds.space_ase.values.astype(float), ds.ase.values.astype(float)
    bound = float(np.median(space_ase.max(axis=1)))  # some variants pass, some fail
    cases = {
        "all": (space_ase > bound, list(range(2))),
        "north": (space_ase[:, [1]] > bound, [1]),
    }
    for scope, (fails, cols) in cases.items():
        spec = {"require": [{"metric": "ase", "at_most": bound, "spaces": scope}]}
        table = rank_table(ds, spec).set_index("variant").sort_index()
        want_status = np.where(fails.any(axis=1), "fail", "pass")
        assert table["status"].tolist() == want_status.tolist(), scope
        assert len(set(want_status)) == 2, "the case must hold passing and failing variants"
        want_spaces = [", ".join(names[cols[j]] for j in np.flatnonzero(row)) for row in fails]
        assert table["failed_spaces"].tolist() == want_spaces, scope
        label = f"ase ≤ {bound:g} in {'every space' if scope == 'all' else scope}"
        np.testing.assert_allclose(table[f"margin: {label}"],
                                   (bound - space_ase[:, cols]).min(axis=1), rtol=1e-12)
    # default scope: the building total, no spaces named
    table = rank_table(ds, {"require": [{"metric": "ase", "at_most": bound}]})
    table = table.set_index("variant").sort_index()
    assert table["status"].tolist() == np.where(building_ase > bound, "fail", "pass").tolist()
    assert set(table["failed_spaces"]) == {""}
    # the printed ranking names the failing spaces
    spec = parse_rank_spec({"require": [{"metric": "ase", "at_most": bound, "spaces": "all"}]},
                           ["ase", "sda"], names)
    out = io.StringIO()
    print_table(rank_table(ds, spec), ds, spec, None, file=out)
    failing = [n for n in names if (space_ase[:, names.index(n)] > bound).any()]
    assert all(f"in {n}" in out.getvalue() or f"in {n}," in out.getvalue() for n in failing)


def test_rank_refuses_unknown_spaces_and_absent_named_spaces_fail(stores, tmp_path):
    from luxsweep.sweep.errors import StudyFileError
    from luxsweep.sweep.rank import rank_table

    ds = stores["building"]
    with pytest.raises(StudyFileError, match=r"rank\.require\.0\.spaces.*'east'.*south, north"):
        rank_table(ds, {"require": [{"metric": "sda", "at_least": 50, "spaces": "east"}]})
    # a variant that lacks a named space cannot be shown to meet the criterion: it fails;
    # `all` covers the spaces the variant has (NaN / level -1 where absent, CONTRACT.md §3)
    lacking = ds.copy(deep=True)
    lacking["space_sda"][0, 1] = np.nan
    named = rank_table(lacking, {"require": [{"metric": "sda", "at_least": 0,
                                              "spaces": ["north"]}]})
    assert named.set_index("variant").loc[0, "status"] == "fail"
    every = rank_table(lacking, {"require": [{"metric": "sda", "at_least": 0, "spaces": "all"}]})
    assert every.set_index("variant").loc[0, "status"] == "pass"


def test_objectives_on_one_space_and_on_the_worst_space(stores):
    """``prefer: [{metric, goal, spaces}]`` scores a named space's value, or the worst of
    several (lowest for max, highest for min): the score and order follow a recount
    from the store's per-space values with the min-max normalisation of sweep.rank."""
    import io

    from luxsweep.sweep.rank import parse_rank_spec, print_table, rank_table

    ds = stores["building"]
    names = [str(s) for s in ds.space.values]
    df = ds.space_daylight_factor_mean.values.astype(float)
    ase = ds.space_ase.values.astype(float)
    cases = {  # spaces -> (objective column, its values by hand)
        ("daylight_factor_mean", "max", "north"): ("daylight_factor_mean (north)",
                                                   df[:, names.index("north")]),
        ("daylight_factor_mean", "max", "all"): ("daylight_factor_mean (worst space)",
                                                 df.min(axis=1)),
        ("ase", "min", "all"): ("ase (worst space)", ase.max(axis=1)),
        ("ase", "min", ("south", "north")): ("ase (worst of south, north)", ase.max(axis=1)),
    }
    for (metric, goal, scope), (column, want) in cases.items():
        spec = {"prefer": [{"metric": metric, "goal": goal,
                            "spaces": list(scope) if isinstance(scope, tuple) else scope}]}
        table = rank_table(ds, spec).set_index("variant").sort_index()
        np.testing.assert_allclose(table[column], want, rtol=1e-6, err_msg=column)
        span = want.max() - want.min()
        assert span > 0, f"{column}: the case must separate the variants: {want}"
        norm = (want - want.min()) / span
        np.testing.assert_allclose(table["score"], norm if goal == "max" else 1 - norm,
                                   rtol=1e-9, err_msg=column)
    # a variant lacking a named space scores NaN and ranks after the others
    lacking = ds.copy(deep=True)
    lacking["space_daylight_factor_mean"][0, names.index("north")] = np.nan
    table = rank_table(lacking, {"prefer": [{"metric": "daylight_factor_mean",
                                             "spaces": "north"}]})
    assert table["variant"].iloc[-1] == 0 and np.isnan(table["score"].iloc[-1])
    # shown with its scope in the terminal table
    spec = parse_rank_spec({"prefer": [{"metric": "sda", "spaces": "all"}]}, ["sda", "ase"],
                           names, ["sda", "ase"])
    out = io.StringIO()
    print_table(rank_table(ds, spec), ds, spec, None, file=out)
    text = out.getvalue()
    assert "sDA, worst" in text and "space [%]" in text, text  # the heading folds


# --------------------------------------------------------------------------- report


def test_report_of_a_building_has_spaces_table_and_a_plan_per_level(stores):
    from luxsweep.sweep.report import build_report
    from luxsweep.sweep.store import SPACE_ABSENT_LEVEL

    ds = stores["building"].copy()
    ds.attrs = {**ds.attrs, "study": stores["building_text"]}
    html = build_report(ds)
    spaces = html.split('<section class="spaces">')[1].split("</section>")[0]
    # building totals first, then each space by name, a column per top variant
    assert spaces.index("Building (all spaces)") < spaces.index(">south<") < spaces.index(
        ">north<")
    assert spaces.count("<tr>") == 1 + 1 + 2  # header, building, two spaces
    # the building's plan: one level (both spaces at z = 0), drawn as one image
    maps = html.split('<section class="maps">')[1].split("</section>")[0]
    assert maps.count("data:image/png") == 1 and "internal openings" in maps
    assert "Daylight across the building" in html
    # pass/fail per space against a criterion on every space
    ds.attrs["study"] = stores["building_text"] + (
        "rank:\n  require:\n    - {metric: sda, at_least: 99, spaces: all}\n")
    spaces = build_report(ds).split('<section class="spaces">')[1].split("</section>")[0]
    want_fail = (ds.space_sda.values < 99).any()
    assert ("✗ misses sDA" in spaces) == bool(want_fail) and "✓ meets its criteria" in spaces
    assert SPACE_ABSENT_LEVEL < 0  # absent spaces are told apart from level 0


def test_report_of_a_room_keeps_its_room_maps_and_has_no_spaces_table(stores):
    # one space: the report stays as it was (the table of one space would repeat the
    # building row), the maps are the room maps of the top variants
    from luxsweep.sweep.report import build_report

    html = build_report(stores["room"])
    assert '<section class="spaces">' not in html
    assert "Daylight across the room for the top variants" in html


def test_building_plan_expands_copies_and_tells_internal_openings_apart():
    # CONTRACT.md §1b: copies are name-1 … name-n, the k-th shifted by (k − 1) × step; a
    # window on a wall that another space covers is an internal opening
    from luxsweep.sweep.report import _expanded_spaces, _window_marks

    tree = {"spaces": [
        {**_space("classroom", [0.0, 0.0, 0.0], 7.2, 8.0, "front", INNER),
         "copies": {"count": 3, "step": [7.4, 0.0, 0.0]}},
        {**_space("corridor", [0.0, 8.0, 0.0], 22.0, 2.0, "right"), "occupied": False}]}
    spaces = _expanded_spaces(tree)
    assert [s["name"] for s in spaces] == ["classroom-1", "classroom-2", "classroom-3",
                                           "corridor"]
    np.testing.assert_allclose([s["origin"][0] for s in spaces], [0.0, 7.4, 14.8, 0.0])
    kinds = [[k for _, _, k in _window_marks(s, [o for o in spaces if o is not s])]
             for s in spaces]
    # each classroom: its front window outside, the back one into the corridor
    assert kinds == [["window", "internal"]] * 3 + [["window"]]
    xs, ys, _ = _window_marks(spaces[1], spaces)[1]
    np.testing.assert_allclose(xs, [7.4 + 3.6 - 0.5 - 0.5, 7.4 + 3.6 - 0.5 + 0.5])
    np.testing.assert_allclose(ys, [8.0, 8.0])
