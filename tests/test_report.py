"""The HTML report (sweep/report.py) renders from a Zarr results store and opens in a browser.

The browser check runs Debian's headless Chromium (installed by `.ci/run`): the
page must load without console messages and a full-page screenshot must be
taken. A control page with a deliberate script error proves that the console
check can fail.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from synthetic_results import write_store

from luxsweep.sweep.errors import ResultsStoreError
from luxsweep.sweep.rank import open_store
from luxsweep.sweep.report import CAUTION, build_report, report_command

SECTIONS = (
    "Summary",
    "Ranking of the variants",
    "Inputs",
    "Geometry",
    "Trade-off between two objectives",
    "What each choice changes",
    "Orientation and climate",
    "Daylight across the room for the top variants",
    "Hour by hour at one point",
    "What the metrics mean",
)


@pytest.fixture(scope="module")
def stores(tmp_path_factory):
    root = tmp_path_factory.mktemp("report")
    return {"series": write_store(root / "with-series.zarr", series=True)}


@pytest.fixture(scope="module")
def report_file(stores):
    assert report_command(str(stores["series"])) == 0
    path = stores["series"].with_name("with-series-report.html")  # the default name
    assert path.is_file()
    return path


def images(text: str) -> list[str]:
    return re.findall(r'<img src="data:image/png;base64,([A-Za-z0-9+/=]+)"', text)


def test_report_holds_every_section_and_is_self_contained(report_file):
    text = report_file.read_text(encoding="utf-8")
    for title in SECTIONS:
        assert f"<h2>{title}</h2>" in text, title
    assert text.count(CAUTION) == 2  # top and footer
    assert "harbour-lane-studios" in text and "22 of 24 variants computed" in text
    # geometry sketch, pareto chart, main effects, orientation × climate, plan maps,
    # hourly map
    pngs = images(text)
    assert len(pngs) == 6
    assert all(len(p) > 2000 for p in pngs)
    # self-contained: no scripts, no external resources
    assert "<script" not in text
    assert not re.search(r'(src|href)="(https?:|//|file:)', text)
    # the ranking shows the two passing variants and both unfinished ones
    assert text.count("✓ all met") == 2
    assert text.count("not finished – not ranked") == 2


def test_report_of_a_missing_store_is_a_clear_error(tmp_path):
    with pytest.raises(ResultsStoreError, match="not found"):
        report_command(str(tmp_path / "missing.zarr"))


# --------------------------------------------------------------------------- browser

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")


def open_in_chromium(page: Path, shot: Path, profile: Path, size=(1280, 4000)):
    """Load a page in headless Chromium; return (exit code, console lines, stderr)."""
    cmd = [
        CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
        "--no-first-run", "--disable-background-networking", "--disable-component-update",
        "--disable-sync", f"--user-data-dir={profile}", "--enable-logging=stderr", "--v=0",
        f"--screenshot={shot}", f"--window-size={size[0]},{size[1]}", page.as_uri(),
    ]
    out = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    console = [line for line in out.stderr.splitlines()
               if ":CONSOLE" in line or "Uncaught" in line]
    return out.returncode, console, out.stderr


@pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed "
                    "(`apt-get install -y chromium`; .ci/run installs it)")
def test_report_opens_in_headless_chromium_without_console_errors(report_file, tmp_path):
    from PIL import Image  # matplotlib's own dependency

    # control: the console check sees a script error
    bad = tmp_path / "control.html"
    bad.write_text("<!DOCTYPE html><p>x</p><script>throw new Error('control')</script>")
    _, console, _ = open_in_chromium(bad, tmp_path / "control.png", tmp_path / "p0", (400, 300))
    assert any("control" in line for line in console), "console check is blind"

    shot = tmp_path / "report.png"
    code, console, stderr = open_in_chromium(report_file, shot, tmp_path / "p1")
    assert code == 0, stderr[-2000:]
    assert console == []
    assert shot.is_file()
    image = np.asarray(Image.open(shot).convert("RGB"))
    assert image.shape == (4000, 1280, 3)
    # The header band is drawn (dark blue #27344d at the top) and the page is not blank:
    # the plots leave many distinct colours below it.
    np.testing.assert_allclose(image[20, 640], (0x27, 0x34, 0x4D), atol=6)
    assert len(np.unique(image[:, :, 0])) > 100
    keep = Path(__file__).parent / "output"
    if keep.is_dir():  # a place to look at it by hand
        shutil.copy(shot, keep / "report.png")


def test_report_from_a_store_written_by_sweep_store(tmp_path):
    """The report reads a store laid out by the engine's own writer (sweep/store.py);
    without stored series it says so and skips the hour-by-hour map."""
    from synthetic_results import AXES, make_dataset

    from luxsweep.sweep import store as results_store

    src = make_dataset(series=False)
    sensor_vars = [n for n in results_store.SENSOR_VARIABLES if n in src]
    variant_vars = [n for n in results_store.VARIANT_VARIABLES if n in src and n != "done"]
    pts = np.column_stack([src["x"].values, src["y"].values, src["z"].values])
    layout = results_store.StoreLayout(
        variant_ids=[str(v) for v in src["variant_id"].values],
        labels=[str(v) for v in src["label"].values],
        axes={a: list(src[a].values) for a in AXES},
        sensors=[pts] * src.sizes["variant"],
        sensor_variables=sensor_vars,
        variant_variables=variant_vars,
        times=None,
        series_chunk=1,
        attrs={"study": src.attrs["study"], "study_hash": "1" * 16, "axes": list(AXES)},
    )
    path = tmp_path / "engine.zarr"
    results_store.create_store(path, layout)
    for i in np.flatnonzero(src["done"].values):
        results_store.write_variant(
            path, int(i), {n: src[n].values[i] for n in sensor_vars},
            {n: src[n].values[i] for n in variant_vars})
    results_store.consolidate(path)
    text = build_report(open_store(path), source=str(path))
    assert text.count("✓ all met") == 2 and text.count("not finished – not ranked") == 2
    assert "were not stored" in text
    assert len(images(text)) == 5  # geometry, trade-off, main effects, map, plans


def test_many_variants_are_drawn_as_a_density_and_said_so(stores, monkeypatch):
    """Above SCATTER_LIMIT finished variants the trade-off chart counts variants per
    hexagon instead of drawing a marker each, and a note under it says so; below it,
    no such note."""
    from luxsweep.sweep import report

    ds = open_store(stores["series"])
    assert "too many to draw one by one" not in build_report(ds)
    monkeypatch.setattr(report, "SCATTER_LIMIT", 3)
    text = build_report(open_store(stores["series"]))
    n = int(ds.done.values.sum())
    assert f"{n} finished variants, too many to draw one by one" in text
