"""Study-file validation (CONTRACT.md §1): every refusal names the file, key path and line.

The checks here are about the study file's own rules (CONTRACT.md §1 and the
extensions documented in sweep/config.py), not physics: no external source is
needed beyond the contract.
"""

from __future__ import annotations

import json
import pickle
import shutil
import textwrap
from pathlib import Path

import pydantic
import pytest
from conftest import TMY3_GREENSBORO, TMY3_SAND_POINT

from luxsweep.sweep.config import RANK_METRICS, Study, json_schema, load_study, parse_study
from luxsweep.sweep.errors import StudyFileError

BASE = textwrap.dedent(
    """\
    name: quarry-lane-test
    climates:
      coastal: climates/coastal.csv
      inland: climates/inland.csv
    room:
      width: 6.0
      depth: 5.0
      height: 3.0
      reflectance: {floor: 0.2, walls: 0.5, ceiling: 0.7}
      windows:
        - wall: front
          width: 3.0
          sill: 0.9
          head: 2.4
          glazing: main
    glazings:
      main: {transmittance: 0.70, panes: 2}
    vary:
      orientation: [90, 180]
      glazings.main.transmittance: [0.70, 0.50]
    """
)


@pytest.fixture
def folder(tmp_path: Path) -> Path:
    (tmp_path / "climates").mkdir()
    shutil.copyfile(TMY3_GREENSBORO, tmp_path / "climates" / "coastal.csv")
    shutil.copyfile(TMY3_SAND_POINT, tmp_path / "climates" / "inland.csv")
    return tmp_path


def refuse(folder: Path, text: str) -> str:
    path = folder / "study.yaml"
    path.write_text(text)
    with pytest.raises(StudyFileError) as info:
        load_study(path)
    message = str(info.value)
    assert str(path) in message  # names the file
    return message


def line_of(text: str, needle: str) -> int:
    return next(i for i, line in enumerate(text.splitlines(), 1) if needle in line)


def test_valid_study_loads_and_resolves_paths(folder):
    path = folder / "study.yaml"
    path.write_text(BASE)
    loaded = load_study(path)
    assert loaded.study.climates["coastal"] == str((folder / "climates/coastal.csv").resolve())
    assert loaded.study.orientation == 180.0  # CONTRACT §1 default
    assert loaded.study.default_climate == "coastal"  # CONTRACT §1: first label


def test_canonical_dict_round_trip_and_pickle(folder):
    path = folder / "study.yaml"
    path.write_text(BASE)
    study = load_study(path).study
    again = Study.model_validate(study.canonical())
    assert again == study
    assert again.canonical() == study.canonical()
    assert pickle.loads(pickle.dumps(study)) == study


def test_models_are_frozen(folder):
    path = folder / "study.yaml"
    path.write_text(BASE)
    study = load_study(path).study
    with pytest.raises(pydantic.ValidationError, match="frozen"):
        study.name = "other"  # type: ignore[misc]


def test_unknown_key_names_path_line_and_suggests(folder):
    text = BASE.replace("sill: 0.9", "sil: 0.9")
    message = refuse(folder, text)
    assert "room.windows.0.sil" in message
    assert f"line {line_of(text, 'sil: 0.9')}," in message
    assert "did you mean 'sill'" in message


def test_unknown_top_level_key_suggests(folder):
    text = BASE.replace("vary:", "vray:")
    message = refuse(folder, text)
    assert "'vray'" in message and "did you mean 'vary'" in message
    assert f"line {line_of(text, 'vray:')}," in message


def test_bad_vary_path_names_path_and_line(folder):
    text = BASE.replace("glazings.main.transmittance:", "glazings.main.transmitance:")
    message = refuse(folder, text)
    assert "vary.glazings.main.transmitance" in message
    assert f"line {line_of(text, 'transmitance:')}," in message
    assert "transmittance" in message  # lists the keys that exist there


def test_vary_index_out_of_range(folder):
    text = BASE.replace("glazings.main.transmittance: [0.70, 0.50]",
                        "room.windows.1.width: [2.0]")
    message = refuse(folder, text)
    assert "room.windows.1.width" in message and "indices 0 to 0" in message


def test_empty_vary_list(folder):
    text = BASE.replace("orientation: [90, 180]", "orientation: []")
    message = refuse(folder, text)
    assert "vary.orientation" in message and "empty" in message
    assert f"line {line_of(text, 'orientation: []')}," in message


def test_wrong_type_in_vary_names_item(folder):
    text = BASE.replace("[0.70, 0.50]", "[0.70, clear]")
    message = refuse(folder, text)
    assert "vary.glazings.main.transmittance.1" in message
    assert "'clear'" in message


def test_out_of_range_vary_value(folder):
    text = BASE.replace("[0.70, 0.50]", "[0.70, 1.2]")
    message = refuse(folder, text)
    assert "glazings.main.transmittance" in message and "1.2" in message


def test_unknown_climate_in_vary(folder):
    text = BASE.replace("orientation: [90, 180]", "climate: [coastal, arctic]")
    message = refuse(folder, text)
    assert "arctic" in message and "vary.climate" in message


def test_wrong_type_names_path_and_line(folder):
    text = BASE.replace("width: 6.0", "width: six metres")
    message = refuse(folder, text)
    assert "room.width" in message and "'six metres'" in message
    assert f"line {line_of(text, 'six metres')}," in message


def test_python_object_tag_is_refused_and_not_run(folder):
    marker = folder / "tag-was-run"
    text = f"name: !!python/object/apply:os.system ['touch {marker}']\n" + BASE.split("\n", 1)[1]
    message = refuse(folder, text)
    assert "line 1" in message and "tag" in message
    assert not marker.exists()


def test_duplicate_key_names_second_line(folder):
    text = BASE.replace("  inland: climates/inland.csv",
                        "  inland: climates/inland.csv\n  coastal: climates/inland.csv")
    message = refuse(folder, text)
    assert "climates.coastal" in message and "line 5," in message and "line 3" in message


def test_missing_weather_file_names_key(folder):
    text = BASE.replace("climates/coastal.csv", "climates/costal.csv")
    message = refuse(folder, text)
    assert "climates.coastal" in message and "costal.csv" in message


def test_rank_metric_must_exist_and_be_computed(folder):
    message = refuse(folder, BASE + "rank:\n  require:\n    - {metric: sdaa, at_least: 50}\n")
    assert "rank.require.0.metric" in message and "did you mean 'sda'" in message
    message = refuse(folder, BASE + "metrics: [udi]\nrank:\n  prefer:\n    - {metric: sda}\n")
    assert "rank.prefer.0.metric" in message and "sda_ase" in message


def test_vary_together_and_exclude_validation(folder):
    together = BASE + ("vary_together:\n  - room.windows.0.width: [2.0, 3.0]\n"
                       "    room.windows.0.offset: [0.0]\n")
    assert "equal lengths" in refuse(folder, together)
    excl = BASE + "exclude:\n  - {orientation: 45}\n"
    assert "exclude.0.orientation" in refuse(folder, excl)
    excl = BASE + "exclude:\n  - {room.width: 6.0}\n"
    assert "not varied" in refuse(folder, excl)


def test_varying_a_store_layout_key_is_refused(folder):
    text = BASE.replace("orientation: [90, 180]", "store_series: [true, false]")
    assert "cannot be varied" in refuse(folder, text)


def test_yaml_syntax_error_names_line(folder):
    text = BASE.replace("  main: {transmittance: 0.70, panes: 2}",
                        "  main: {transmittance: 0.70, panes: 2")
    message = refuse(folder, text)
    assert "not valid YAML" in message and "line" in message


def test_parse_errors_list_problems_without_traceback_text(folder):
    message = refuse(folder, "[1, 2]\n")
    assert "mapping" in message


def test_json_schema_export():
    schema = json_schema()
    text = json.dumps(schema)
    assert schema["type"] == "object"
    for key in ("climates", "room", "vary", "vary_together", "exclude", "compute",
                "metric_options", "shaded_transmittance"):
        assert key in text
    assert set(schema["required"]) >= {"name", "climates", "glazings"}


def _schema_models(schema):
    return {"Study": schema, **schema["$defs"]}


def test_json_schema_describes_every_key_in_plain_sentences_with_its_default():
    import dataclasses

    from luxsweep.kernels.coefficients import Settings

    schema = json_schema()
    models = _schema_models(schema)
    assert set(models) >= {"Study", "Room", "Window", "Grid", "Compute", "Glazing"}
    texts = []
    for model, body in models.items():
        assert body.get("description"), model
        texts.append(body["description"])
        required = set(body.get("required", []))
        for name, prop in body["properties"].items():
            where = f"{model}.{name}"
            text = prop.get("description", "")
            assert text.endswith("."), where
            texts.append(text)
            default = prop.get("default")
            # every key says whether it is required or what it defaults to
            if name in required:
                assert "Required" in text, where
            elif default not in (None, [], {}) and not isinstance(default, dict):
                shown = (f"{default:g}" if isinstance(default, float)
                         else str(default).lower() if isinstance(default, bool)
                         else ", ".join(f"{v:g}" for v in default)
                         if isinstance(default, list) and isinstance(default[0], float)
                         else None)
                assert "Default:" in text, where
                if shown is not None:
                    assert f"Default: {shown}." in text, where
            else:
                assert ("Default:" in text or "Optional" in text
                        or "Required for" in text), where
    # plain sentences: no markup, no code paths, no files users do not have
    for text in texts:
        for bad in ("`", "**", ":class:", ":func:", "CONTRACT", "sweep.", "kernels.", "§",
                    "MF:", "MF2", "<", "[deg]"):
            assert bad not in text, (bad, text)
    # the ray-tracing defaults are the kernel's own
    kernel = {f.name: f.default for f in dataclasses.fields(Settings)}
    for name, prop in models["Compute"]["properties"].items():
        assert prop["default"] == kernel[name], name
    assert schema["properties"]["compute"]["default"] == {
        k: kernel[k] for k in models["Compute"]["properties"]}
    # conventions stated in words (README "Conventions and defaults")
    orientation = schema["properties"]["orientation"]["description"]
    for fragment in ("clockwise from north", "0 means the front facade faces north",
                     "90 east", "180 south", "Default: 180."):
        assert fragment in orientation
    offset = models["Window"]["properties"]["offset"]["description"]
    assert "centre of its wall" in offset and "plus x" in offset and "plus y" in offset
    assert "x runs along the front wall" in schema["description"]
    assert "Reinhart subdivision n, with 144 n² + 1 patches" in (
        models["Compute"]["properties"]["subdivision"]["description"])


def test_rank_metric_table_matches_store():
    from luxsweep.sweep.store import VARIANT_VARIABLES

    assert set(RANK_METRICS) == set(VARIANT_VARIABLES) - {"done"}


def test_parse_study_relative_to_given_path(folder):
    loaded = parse_study(BASE, folder / "elsewhere.yaml")
    assert loaded.folder == folder.resolve()


def _alias_bomb(depth: int) -> str:
    lines = ["notes:", "  a0: &a0 [x, x, x, x, x, x, x, x, x, x]"]
    for i in range(1, depth + 1):
        lines.append(f"  a{i}: &a{i} [" + ", ".join([f"*a{i - 1}"] * 10) + "]")
    return "\n".join(lines) + "\n"


def test_alias_bomb_is_refused_without_expanding(folder):
    """Nested aliases expanding to 10**7 values ("billion laughs", common practice
    in YAML hardening) are refused in well under a second, naming the file and an
    alias line; the refusal happens before expansion, so time does not grow with
    the expanded size (bound 2 s: generous for a machine under load)."""
    import time

    text = BASE + _alias_bomb(6)
    t0 = time.perf_counter()
    message = refuse(folder, text)
    assert time.perf_counter() - t0 < 2.0
    assert "alias" in message and "100,000" in message
    alias_lines = [i for i, line in enumerate(text.splitlines(), 1) if "*a" in line]
    assert any(f"line {n}:" in message for n in alias_lines)


def test_recursive_alias_is_refused(folder):
    message = refuse(folder, BASE + "notes: &loop [1, *loop]\n")
    assert "alias '*loop'" in message


def test_small_aliases_stay_allowed(folder):
    """Anchors used as plain shorthand are fine (the limit only stops blow-ups)."""
    text = BASE.replace("main: {transmittance: 0.70, panes: 2}",
                        "main: &pane {transmittance: 0.70, panes: 2}\n  spare: *pane")
    path = folder / "study.yaml"
    path.write_text(text)
    assert load_study(path).study.glazings["spare"].transmittance == 0.70


def test_compute_budget_keys_reach_the_kernel_settings_and_the_key(folder):
    # the element budget, memory bound and target error are study-file keys;
    # they change the coefficients, so they enter the coefficient key
    from luxsweep.kernels.coefficients import coefficient_key
    from luxsweep.sweep.plan import build_geometry, settings_of

    path = folder / "study.yaml"
    path.write_text(BASE + "compute: {max_elements: 500, memory_limit: 1.5, target_error: 0.02}\n")
    study = load_study(path).study
    settings = settings_of(study)
    assert (settings.max_elements, settings.memory_limit, settings.target_error) == (500, 1.5,
                                                                                      0.02)
    path.write_text(BASE)
    plain = load_study(path).study
    geometry, sensors, _ = build_geometry(plain)
    assert (coefficient_key(geometry, sensors, settings)
            != coefficient_key(geometry, sensors, settings_of(plain)))


@pytest.mark.parametrize("text, fragment", [
    ("target_error: 2", "fraction"),          # 2 meant as 2 %
    ("target_error: -0.01", "fraction"),
    ("max_elements: 10", "at least 100"),
    ("memory_limit: 0", "compute.memory_limit"),
])
def test_compute_budget_keys_refuse_bad_values(folder, text, fragment):
    message = refuse(folder, BASE + f"compute: {{{text}}}\n")
    assert fragment in message
