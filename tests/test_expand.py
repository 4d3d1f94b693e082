"""Expansion of ``vary``, ``vary_together`` and ``exclude`` into variants with stable ids."""

from __future__ import annotations

import hashlib
import shutil
import textwrap
from pathlib import Path

import pytest
from conftest import TMY3_GREENSBORO, TMY3_SAND_POINT

from luxsweep.sweep.config import canonical_json, load_study
from luxsweep.sweep.errors import StudyFileError
from luxsweep.sweep.expand import expand, get_path, set_path, split_path, study_hash

STUDY = textwrap.dedent(
    """\
    name: birchfold-expand
    climates:
      coastal: climates/coastal.csv
      inland: climates/inland.csv
    room:
      width: 6.0
      depth: 5.0
      height: 3.0
      windows:
        - {wall: front, width: 3.0, sill: 0.9, head: 2.4, glazing: main}
    glazings:
      main: {transmittance: 0.70, panes: 2}
    vary:
      orientation: [90, 180, 270]
      climate: [coastal, inland]
      glazings.main.transmittance: [0.70, 0.50]
    """
)


def write(folder: Path, text: str) -> Path:
    (folder / "climates").mkdir(parents=True, exist_ok=True)
    shutil.copyfile(TMY3_GREENSBORO, folder / "climates" / "coastal.csv")
    shutil.copyfile(TMY3_SAND_POINT, folder / "climates" / "inland.csv")
    path = folder / "study.yaml"
    path.write_text(text)
    return path


def test_full_factorial_order_labels_and_values(tmp_path):
    variants = expand(load_study(write(tmp_path, STUDY)))
    assert len(variants) == 3 * 2 * 2
    first, last = variants[0], variants[-1]
    assert first.label == "orientation=90 climate=coastal glazings.main.transmittance=0.7"
    assert last.axes == {"orientation": 270.0, "climate": "inland",
                         "glazings.main.transmittance": 0.5}
    assert last.study.glazings["main"].transmittance == 0.5
    assert last.study.climate == "inland" and last.study.orientation == 270.0
    assert [v.index for v in variants] == list(range(12))
    assert not last.study.vary  # resolved: nothing left to vary


def test_variant_id_is_sha256_of_canonical_params(tmp_path):
    variants = expand(load_study(write(tmp_path, STUDY)))
    v = variants[5]
    digest = hashlib.sha256(canonical_json(v.params).encode()).hexdigest()[:16]
    assert v.variant_id == digest
    assert len({x.variant_id for x in variants}) == len(variants)
    # files enter as content hashes, never as paths
    assert "climates" not in v.params and len(v.params["climate_file"]) == 64


def test_ids_stable_when_the_study_folder_moves(tmp_path):
    a = expand(load_study(write(tmp_path / "a", STUDY)))
    b = expand(load_study(write(tmp_path / "deeper" / "b", STUDY)))
    assert [v.variant_id for v in a] == [v.variant_id for v in b]


def test_ids_ignore_name_and_rank_but_follow_physics(tmp_path):
    base = expand(load_study(write(tmp_path / "a", STUDY)))
    renamed = STUDY.replace("birchfold-expand", "other-name") + (
        "rank:\n  prefer:\n    - {metric: sda}\n")
    other = expand(load_study(write(tmp_path / "b", renamed)))
    assert [v.variant_id for v in base] == [v.variant_id for v in other]
    changed = STUDY.replace("depth: 5.0", "depth: 5.5")
    moved = expand(load_study(write(tmp_path / "c", changed)))
    assert not {v.variant_id for v in base} & {v.variant_id for v in moved}


def test_vary_together_zips_paths(tmp_path):
    text = STUDY + ("vary_together:\n  - room.windows.0.width: [2.0, 3.0, 4.0]\n"
                    "    room.windows.0.offset: [0.0, 0.5, -0.5]\n")
    variants = expand(load_study(write(tmp_path, text)))
    assert len(variants) == 12 * 3
    pairs = {(v.axes["room.windows.0.width"], v.axes["room.windows.0.offset"])
             for v in variants}
    assert pairs == {(2.0, 0.0), (3.0, 0.5), (4.0, -0.5)}


def test_exclude_drops_matching_combinations(tmp_path):
    text = STUDY + "exclude:\n  - {orientation: 270, climate: inland}\n  - {orientation: 90}\n"
    variants = expand(load_study(write(tmp_path, text)))
    assert len(variants) == 12 - 4 - 2  # minus the four at 90°, minus 270° inland (two)
    assert all(v.axes["orientation"] != 90 for v in variants)
    assert not any(v.axes["orientation"] == 270 and v.climate == "inland" for v in variants)


def test_everything_excluded_is_an_error(tmp_path):
    text = STUDY + "exclude:\n  - {climate: coastal}\n  - {climate: inland}\n"
    with pytest.raises(StudyFileError, match="every variant is excluded"):
        expand(load_study(write(tmp_path, text)))


def test_repeated_value_gives_identical_variants_error(tmp_path):
    text = STUDY.replace("[90, 180, 270]", "[90, 90.0]")
    with pytest.raises(StudyFileError, match="identical"):
        expand(load_study(write(tmp_path, text)))


def test_study_hash_depends_on_variants_not_on_rank(tmp_path):
    a = load_study(write(tmp_path / "a", STUDY))
    ranked = STUDY + "rank:\n  prefer:\n    - {metric: ase, goal: min}\n"
    b = load_study(write(tmp_path / "b", ranked))
    c = load_study(write(tmp_path / "c", STUDY.replace("[0.70, 0.50]", "[0.70, 0.45]")))
    assert study_hash(a, expand(a)) == study_hash(b, expand(b))
    assert study_hash(a, expand(a)) != study_hash(c, expand(c))


def test_no_vary_gives_one_base_variant(tmp_path):
    text = STUDY.split("vary:")[0]
    variants = expand(load_study(write(tmp_path, text)))
    assert len(variants) == 1 and variants[0].label == "base" and variants[0].axes == {}


def test_dotted_path_helpers():
    data = {"room": {"windows": [{"width": 1.0}]}}
    parts = split_path("room.windows.0.width")
    assert parts == ("room", "windows", 0, "width")
    changed = set_path(data, parts, 2.0)
    assert get_path(changed, parts) == 2.0 and get_path(data, parts) == 1.0


MESH_STUDY = textwrap.dedent(
    """\
    name: birchfold-mesh
    climates:
      coastal: climates/coastal.csv
    mesh: room.obj
    materials:
      floor: {reflectance: 0.2}
      walls: {reflectance: 0.5}
      ceiling: {reflectance: 0.7}
      glass: {glazing: main}
    glazings:
      main: {transmittance: 0.70, panes: 2}
    grid: {floors: [floor]}
    vary:
      mesh: [room.obj, ../elsewhere/room.obj]
    """
)


def test_varied_mesh_files_are_hashed_by_content(tmp_path):
    """A varied mesh path expands (each file hashed as first met); ids follow file
    contents, labels keep the paths as written in the study file."""
    from conftest import SEALED_ROOM

    study_dir, other = tmp_path / "study", tmp_path / "elsewhere"
    path = write(study_dir, MESH_STUDY)
    other.mkdir()
    (study_dir / "room.obj").write_text(SEALED_ROOM)
    (other / "room.obj").write_text(SEALED_ROOM.replace("v 2 1.5 2", "v 2 1.5 2.2"))
    variants = expand(load_study(path))
    assert [v.label for v in variants] == ["mesh=room.obj", "mesh=../elsewhere/room.obj"]
    assert len({v.variant_id for v in variants}) == 2
    digest = hashlib.sha256((other / "room.obj").read_bytes()).hexdigest()
    assert variants[1].params["mesh"] == digest
    (other / "room.obj").write_text(SEALED_ROOM)  # same bytes as the base mesh
    with pytest.raises(StudyFileError, match="identical"):
        expand(load_study(path))


def test_missing_varied_mesh_is_refused_at_check(tmp_path):
    from conftest import SEALED_ROOM

    path = write(tmp_path, MESH_STUDY.replace("../elsewhere/room.obj", "missing.obj"))
    (tmp_path / "room.obj").write_text(SEALED_ROOM)
    with pytest.raises(StudyFileError, match=r"vary\.mesh.*missing\.obj.*does not exist"):
        load_study(path)
