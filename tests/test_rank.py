"""Ranking (sweep/rank.py) on constructed variants whose answer is worked out by hand.

Definitions checked: a requirement's pass/fail and margin (CONTRACT.md §1
``rank.require``), min-max normalised weighted scores, Pareto dominance
(V. Pareto; the usual definition in multi-objective optimisation, e.g. K. Deb,
"Multi-objective optimization using evolutionary algorithms", Wiley 2001,
Def. 2.5 — from memory) and main effects as level mean minus grand mean
(D. C. Montgomery, "Design and analysis of experiments", ch. 5 — from memory).
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from synthetic_results import AXES, NOT_DONE, write_store

from luxsweep.sweep.errors import ResultsStoreError, StudyFileError
from luxsweep.sweep.rank import (
    axes_of,
    coord_values,
    main_effects,
    metric_names,
    open_store,
    pareto_front,
    rank_command,
    rank_table,
)

HAND_STUDY = """\
name: hand-check
rank:
  require:
    - {metric: sda, at_least: 55}
    - {metric: ase, at_most: 10}
  prefer:
    - {metric: udi_useful_mean, goal: max, weight: 2}
    - {metric: ase, goal: min, weight: 1}
"""


def hand_dataset() -> xr.Dataset:
    """Six variants: v0, v2, v3 meet both criteria (v2 exactly at both bounds), v1 misses
    ASE, v5 misses both, v4 is not done."""
    sda = [60, 80, 55, 70, np.nan, 40]
    ase = [5, 12, 10, 2, np.nan, 20]
    udi = [0.85, 0.9, 0.5, 0.8, np.nan, 0.7]
    done = [True, True, True, True, False, True]
    return xr.Dataset(
        {
            "sda": ("variant", np.array(sda, np.float32)),
            "ase": ("variant", np.array(ase, np.float32)),
            "udi_useful_mean": ("variant", np.array(udi, np.float32)),
            "en17037_level": ("variant", np.array([1, 2, 0, 1, 0, 0], np.int8)),
            "daylight_autonomy": (("variant", "sensor"), np.zeros((6, 2), np.float32)),
            "done": ("variant", np.array(done)),
        },
        coords={
            "variant_id": ("variant", [f"v{i}" for i in range(6)]),
            "orientation": ("variant", [90, 180, 90, 180, 90, 180]),
            "x": ("sensor", [1.0, 2.0]),
        },
        attrs={"study": HAND_STUDY},
    )


def test_pass_fail_margins_order_and_ranks_by_hand():
    t = rank_table(hand_dataset())
    # Order worked out by hand from the scores below: passing v0, v3, v2 by
    # score, then failing v1 (one miss) before v5 (two misses), then incomplete v4.
    assert list(t["variant_id"]) == ["v0", "v3", "v2", "v1", "v5", "v4"]
    assert list(t["status"]) == ["pass", "pass", "pass", "fail", "fail", "incomplete"]
    assert list(t["rank"].iloc[:5]) == [1, 2, 3, 4, 5] and t["rank"].isna().iloc[5]
    by = t.set_index("variant_id")
    # margins: value − at_least, at_most − value; exactly at a bound passes (margin 0)
    assert by.loc["v2", "margin: sda ≥ 55"] == 0 and by.loc["v2", "margin: ase ≤ 10"] == 0
    assert by.loc["v1", "margin: ase ≤ 10"] == -2
    assert by.loc["v5", "failed"] == "sda ≥ 55; ase ≤ 10"
    # scores: udi normalised over 0.5..0.9 (max), ase over 2..20 (min), weights 2:1
    expected = {
        "v0": (2 * 0.875 + (1 - 3 / 18)) / 3,
        "v1": (2 * 1.0 + (1 - 10 / 18)) / 3,
        "v2": (2 * 0.0 + (1 - 8 / 18)) / 3,
        "v3": (2 * 0.75 + 1.0) / 3,
        "v5": (2 * 0.5 + 0.0) / 3,
    }
    for vid, score in expected.items():
        # float32 store values → normalised shares good to ~1e-7
        assert by.loc[vid, "score"] == pytest.approx(score, abs=1e-6), vid
    assert np.isnan(by.loc["v4", "score"])
    # Pareto among the passing variants on (udi max, ase min): v0 (0.85, 5) and
    # v3 (0.8, 2); v2 (0.5, 10) is dominated; v1 is infeasible, so not in the set.
    assert set(t.loc[t["pareto"], "variant_id"]) == {"v0", "v3"}


def test_rank_spec_given_explicitly_overrides_store():
    spec = {"require": [{"metric": "en17037_level", "at_least": 2}]}
    t = rank_table(hand_dataset(), spec)
    assert list(t.loc[t["status"] == "pass", "variant_id"]) == ["v1"]
    assert t["score"].isna().all()  # no objectives → no score
    # without objectives the failing variants keep store order
    assert list(t["variant_id"]) == ["v1", "v0", "v2", "v3", "v5", "v4"]


def test_unknown_metric_is_a_clear_error_listing_valid_names():
    with pytest.raises(StudyFileError) as err:
        rank_table(hand_dataset(), {"prefer": [{"metric": "sDA", "goal": "max"}]})
    message = str(err.value)
    assert "rank.prefer.0.metric" in message and "'sDA'" in message
    for name in ("ase", "en17037_level", "sda", "udi_useful_mean"):
        assert name in message
    assert "done" not in message.split("has:")[1]  # `done` is not a metric


@pytest.mark.parametrize(
    "spec,place",
    [
        ({"require": [{"metric": "sda"}]}, "rank.require.0"),
        ({"require": [{"metric": "sda", "at_least": 1, "at_most": 2}]}, "rank.require.0"),
        ({"prefer": [{"metric": "sda", "goal": "up"}]}, "rank.prefer.0.goal"),
        ({"prefer": [{"metric": "sda", "weight": -1}]}, "rank.prefer.0.weight"),
        ({"keep": []}, "rank.keep"),
    ],
)
def test_bad_rank_section_names_the_key(spec, place):
    with pytest.raises(StudyFileError, match=place.replace(".", r"\.")):
        rank_table(hand_dataset(), spec)


def test_metric_names_are_per_variant_numeric_variables():
    assert metric_names(hand_dataset()) == ["ase", "en17037_level", "sda", "udi_useful_mean"]


def test_pareto_front_by_hand():
    # Both maximised: A(1,5) B(2,4) C(2,2) D(3,1) E(1,5) F(0,0) G(nan,1).
    # C is dominated by B, F by all; E equals A (both kept); G has a NaN.
    v = np.array([[1, 5], [2, 4], [2, 2], [3, 1], [1, 5], [0, 0], [np.nan, 1]])
    np.testing.assert_array_equal(
        pareto_front(v, ["max", "max"]), [1, 1, 0, 1, 1, 0, 0]
    )
    # Second objective minimised: front is the points with the best trade-off of
    # high first / low second: D(3,1) dominates everything except F(0,0) and G.
    np.testing.assert_array_equal(
        pareto_front(v, ["max", "min"]), [0, 0, 0, 1, 0, 1, 0]
    )


def test_main_effects_of_a_two_by_two_factorial():
    # metric = 10 + 2a + 3b on a full 2×2 factorial: values 10, 13, 12, 15, grand mean
    # 12.5; a: 11.5 − 12.5 = −1, 13.5 − 12.5 = +1; b: −1.5, +1.5 (level mean − grand).
    ds = xr.Dataset(
        {"m": ("variant", [10.0, 13.0, 12.0, 15.0, 99.0]),
         "done": ("variant", [True, True, True, True, False])},
        coords={"a": ("variant", [0, 0, 1, 1, 1]),
                "b": ("variant", ["lo", "hi", "lo", "hi", "hi"])},
    )
    e = main_effects(ds, "m").set_index(["axis", "value"])
    assert e.loc[("a", 0), "effect"] == -1.0 and e.loc[("a", 1), "effect"] == 1.0
    assert e.loc[("b", "lo"), "effect"] == -1.5 and e.loc[("b", "hi"), "effect"] == 1.5
    assert e.loc[("a", 1), "n"] == 2  # the unfinished variant is left out
    with pytest.raises(StudyFileError, match="unknown metric"):
        main_effects(ds, "nope")


# --------------------------------------------------------------------------- a real store


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    return write_store(tmp_path_factory.mktemp("rank") / "results.zarr", series=False)


def test_rank_command_on_a_zarr_store(store, tmp_path, capsys):
    csv = tmp_path / "ranking.csv"
    assert rank_command(str(store), top=3, csv=str(csv)) == 0
    out = capsys.readouterr().out
    assert "harbour-lane-studios" in out
    assert "22 of 24 variants complete" in out and "2 not finished" in out
    table = pd.read_csv(csv)
    assert len(table) == 24
    assert (table["status"] == "incomplete").sum() == len(NOT_DONE)
    ds = open_store(store)
    assert axes_of(ds) == list(AXES)
    # every pass row meets the study's criteria (sda ≥ 40, ase ≤ 10) and vice versa
    done = table["status"] != "incomplete"
    meets = (table["sda"] >= 40) & (table["ase"] <= 10)
    assert ((table["status"] == "pass") == (meets & done)).all()
    assert table.loc[done, "rank"].tolist() == list(range(1, done.sum() + 1))
    # --top 3 shows three ranked rows (plus the incomplete ones); wrapped lines of a
    # row are indented past the rank column
    shown = [line for line in out.splitlines() if re.match(r"^\s{0,2}(\d+|–)\s{2,}", line)]
    assert len(shown) == 3 + len(NOT_DONE)
    # the narrow table fits a 100-column terminal (output here is not a terminal)
    # (the line naming the CSV file holds a path, as long as the folder it was given)
    table_lines = [line for line in out.splitlines() if not line.startswith("ranking written")]
    assert max(len(line.rstrip()) for line in table_lines) <= 100
    assert "misses" in out or "all met" in out
    # the CSV names each variant by its values (orientation 90 = east, CONTRACT §1)
    assert table["name"].str.match(r"^(east|south|west) · (coastal|inland) · τ ").all()


def test_rank_wide_shows_ids_and_axes(store, capsys):
    assert rank_command(str(store), top=2, wide=True) == 0
    out = capsys.readouterr().out
    ids = [str(v)[:10] for v in pd.Series(coord_values(open_store(store), "variant_id"))]
    assert sum(i in out for i in ids) >= 2
    assert "window width" in out and "Pareto" in out


def test_rank_without_criteria_makes_no_claim(store, tmp_path, capsys):
    import shutil

    import zarr

    bare = tmp_path / "bare.zarr"
    shutil.copytree(store, bare)
    group = zarr.open_group(str(bare), mode="r+")
    text = group.attrs["study"]
    group.attrs["study"] = text[:text.index("rank:")]
    zarr.consolidate_metadata(str(bare))
    assert rank_command(str(bare)) == 0
    out = capsys.readouterr().out
    assert "every criterion" not in out and "no criteria given" in out
    # the main metrics are shown instead (CONTRACT §3 per-variant variables)
    for heading in ("sDA [%]", "ASE [%]", "EN 17037"):
        assert heading in out
    assert re.search(r"\d (none|minimum|medium|high)\b", out)


def test_rank_command_missing_store_is_a_clear_error(tmp_path):
    with pytest.raises(ResultsStoreError, match="not found"):
        rank_command(str(tmp_path / "nothing.zarr"))
