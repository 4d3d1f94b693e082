"""The command line answers --version and --help (CONTRACT.md §2)."""

import hashlib
import re
import subprocess
import sys

from luxsweep import sweep


def test_version_flag_prints_package_version():
    out = subprocess.run(
        [sys.executable, "-m", "luxsweep.sweep.cli", "--version"], capture_output=True, text=True
    )
    assert out.returncode == 0
    assert out.stdout.strip() == f"luxsweep {sweep.__version__}"


def test_help_lists_program_name():
    out = subprocess.run(
        [sys.executable, "-m", "luxsweep.sweep.cli", "--help"], capture_output=True, text=True
    )
    assert out.returncode == 0
    assert "luxsweep" in out.stdout


# --------------------------------------------------------------------------
# commands (CONTRACT.md §2)

import json  # noqa: E402

from conftest import write_tiny_study  # noqa: E402


def test_check_accepts_a_valid_study(tmp_path, cli):
    study = write_tiny_study(tmp_path)
    result = cli("check", study)
    assert result.code == 0, result.err
    assert "8 variants" in result.out


def test_check_refuses_bad_input_with_exit_2_and_no_traceback(tmp_path, cli):
    study = write_tiny_study(tmp_path)
    study.write_text(study.read_text().replace("sill: 0.9", "sil: 0.9"))
    result = cli("check", study)
    assert result.code == 2
    assert "Traceback" not in result.text
    assert "room.windows.0.sil" in result.err and "did you mean 'sill'" in result.err


def test_check_schema_prints_json_schema(cli):
    result = cli("check", "--schema")
    assert result.code == 0
    schema = json.loads(result.out)
    assert "vary" in schema["properties"]


def test_plan_json_lists_keys_and_estimate(tmp_path, cli):
    study = write_tiny_study(tmp_path, widths=(1.2, 1.8))
    result = cli("plan", study, "--json", "--cache", tmp_path / "cache")
    assert result.code == 0, result.err
    plan = json.loads(result.out)
    assert plan["estimate"]["coefficient_sets"] == 2
    assert plan["estimate"]["variants"] == 16
    assert len({v["variant_id"] for v in plan["variants"]}) == 16
    text = cli("plan", study, "--cache", tmp_path / "cache")
    assert text.code == 0 and "coefficient sets: 2" in text.out
    # an estimated time from rates measured here: more workers, less time
    seconds = plan["estimate"]["seconds"]
    rates = plan["estimate"]["measured_rates"]
    assert rates["rays_per_second"] > 0 and rates["flops_per_second"] > 0
    assert seconds["wall"] > seconds["coefficients"] / 2 > 0
    assert "estimated time: about" in text.out and "on 2 workers" in cli(
        "plan", study, "--cache", tmp_path / "cache", "--workers", "2").out
    more = json.loads(cli("plan", study, "--json", "--cache", tmp_path / "cache",
                          "--workers", "8").out)["estimate"]["seconds"]
    one = json.loads(cli("plan", study, "--json", "--cache", tmp_path / "cache",
                         "--workers", "1").out)["estimate"]["seconds"]
    assert more["wall"] < one["wall"]


def test_missing_study_file_is_exit_2(tmp_path, cli):
    result = cli("run", tmp_path / "nope.yaml")
    assert result.code == 2 and "nope.yaml" in result.err


def test_bad_worker_count_is_an_argument_error(tmp_path, cli):
    result = cli("run", tmp_path / "s.yaml", "--workers", "0")
    assert result.code == 2


def test_rank_and_report_are_registered_when_present():
    import importlib.util

    from luxsweep.sweep.cli import build_parser

    text = build_parser().format_help()
    for command in ("demo", "check", "plan", "run"):
        assert command in text
    for command in ("rank", "report"):
        present = importlib.util.find_spec(f"luxsweep.sweep.{command}") is not None
        assert (command in text) == present


def test_demo_study_is_valid(tmp_path, cli):
    from luxsweep.sweep.demo import write_demo

    study = write_demo(tmp_path / "demo")
    result = cli("check", study)
    assert result.code == 0, result.err
    assert "96 variants" in result.out and "4 distinct geometries" in result.out


def test_demo_never_overwrites_an_edited_study(tmp_path, capsys):
    from luxsweep.sweep.demo import WRITTEN_RECORD, demo_text, write_demo

    study = write_demo(tmp_path / "demo")
    assert study.read_text() == demo_text()
    edited = study.read_text().replace("spacing: 0.75", "spacing: 0.6")
    assert edited != demo_text()
    study.write_text(edited)
    assert write_demo(tmp_path / "demo") == study
    assert study.read_text() == edited  # kept, and said so
    assert "differs from the bundled demo" in capsys.readouterr().out
    # a study luxsweep itself wrote (an earlier version's demo) is brought up to date
    older = demo_text().replace("alderwick-east-annex", "alderwick-east-annex-old")
    study.write_text(older)
    (study.parent / WRITTEN_RECORD).write_text(hashlib.sha256(older.encode()).hexdigest())
    write_demo(tmp_path / "demo")
    assert study.read_text() == demo_text()


def test_example_studies_are_valid(tmp_path, cli):
    import shutil

    from conftest import REPO, TMY3_GREENSBORO, TMY3_SAND_POINT

    examples = tmp_path / "examples"
    shutil.copytree(REPO / "examples", examples)
    for folder in (examples / "climates", examples / "mesh-studio" / "climates"):
        folder.mkdir(exist_ok=True)
        shutil.copyfile(TMY3_GREENSBORO, folder / "piedmont.csv")
        shutil.copyfile(TMY3_SAND_POINT, folder / "coast.csv")
    for study in (examples / "shaded-office.yaml", examples / "mesh-studio" / "study.yaml"):
        result = cli("check", study)
        assert result.code == 0, result.err


def test_output_and_store_paths_are_refused_in_plain_sentences(tmp_path, cli):
    missing = tmp_path / "no-such-folder"
    for argv, words in (
        (("rank", tmp_path / "r.zarr", "--csv", missing / "r.csv"), "does not exist"),
        (("report", tmp_path / "r.zarr", "--html", missing / "r.html"), "does not exist"),
        (("report", tmp_path / "r.zarr", "--html", tmp_path), "is a folder"),
        (("rank", tmp_path / "absent.zarr"), "not found"),
    ):
        result = cli(*argv)
        assert result.code == 2, argv
        assert words in result.err and "Traceback" not in result.err
        assert not re.search(r"\b[A-Z][a-z]+(Error|Exception)\b", result.err), result.err
    (tmp_path / "afile").write_text("x")
    (tmp_path / "empty.zarr").mkdir()
    for store, words in ((tmp_path / "afile", "is a file"),
                         (tmp_path / "empty.zarr", "not a readable luxsweep results store")):
        result = cli("rank", store)
        assert result.code == 2 and words in result.err
        assert not re.search(r"\b[A-Z][a-z]+(Error|Exception)\b", result.err), result.err


def test_run_fresh_discards_the_store_of_an_edited_study(tmp_path, cli, monkeypatch):
    import xarray as xr

    study = write_tiny_study(tmp_path, orientations=(180.0,), climates=("coastal",),
                             transmittances=(0.7,))
    out, cache = tmp_path / "r.zarr", tmp_path / "cache"
    assert cli("run", study, "--out", out, "--cache", cache, "--workers", "1").code == 0
    study.write_text(study.read_text().replace("transmittance: [0.7]",
                                               "transmittance: [0.7, 0.4]"))
    refused = cli("run", study, "--out", out, "--cache", cache, "--workers", "1")
    assert refused.code == 2 and "different study" in refused.err
    fresh = cli("run", study, "--out", out, "--cache", cache, "--workers", "1", "--fresh")
    assert fresh.code == 0, fresh.err
    assert "discarding the results store" in fresh.err and "earlier version" in fresh.err
    ds = xr.open_zarr(out)
    assert ds.sizes["variant"] == 2 and bool(ds["done"].all())
    assert not list(tmp_path.glob("r.zarr.creating-*"))
    # a store begun by kernels that compute differently is never finished by these
    import luxsweep.kernels

    monkeypatch.setattr(luxsweep.kernels, "RESULTS_VERSION", "src-other")
    mixed = cli("run", study, "--out", out, "--cache", cache, "--workers", "1")
    assert mixed.code == 2 and "result code differs" in mixed.err
    monkeypatch.undo()
    # never a folder that is not a results store
    other = tmp_path / "photos"
    other.mkdir()
    (other / "keep.txt").write_text("mine")
    result = cli("run", study, "--out", other, "--cache", cache, "--workers", "1", "--fresh")
    assert result.code == 2 and (other / "keep.txt").read_text() == "mine"
