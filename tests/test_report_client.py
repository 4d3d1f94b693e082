"""The report a consultant sends: names by values, inputs from the weather files'
headers, the geometry sketch, the cover block, print to PDF (issue: client-ready).

A real tiny study is run once (real TMY3 years bundled with pvlib), then its
report is checked. The expected site facts are read from the weather files'
own header lines (pvlib's bundled TMY3 files: Greensboro NC, 36.1 N, 79.95 W,
UTC−5; Sand Point AK, 55.317 N, 160.517 W, UTC−9), not from our reader.
"""

from __future__ import annotations

import csv
import re
from pathlib import Path

import pytest
from conftest import TMY3_GREENSBORO, TMY3_SAND_POINT, write_tiny_study

from luxsweep.sweep.rank import open_store
from luxsweep.sweep.report import build_report, find_chromium

EXTRA = """\
labels:
  glazings.main.transmittance: "glass transmittance"
project:
  project: Kestrel Yard Library
  client: Kestrel Yard Trust
  author: Example Daylight Studio
  issue_date: 2026-12-04
"""


def _header(path: Path) -> list[str]:
    with path.open(newline="") as f:
        return next(csv.reader(f))


@pytest.fixture(scope="module")
def tiny_store(tmp_path_factory):
    from luxsweep.sweep.run import run_study

    folder = tmp_path_factory.mktemp("client")
    study = write_tiny_study(folder, name="kestrel-yard", orientations=(90.0, 180.0),
                             climates=("coastal", "inland"), transmittances=(0.7,),
                             extra=EXTRA)
    text = study.read_text().replace(
        "    - {wall: front, width: 1.5, sill: 0.9, head: 2.1, offset: 0.0, glazing: main}\n",
        "    - {wall: front, width: 1.5, sill: 0.9, head: 2.1, offset: 0.0, glazing: main}\n"
        "  overhang: {depth: 0.5, gap: 0.1}\n"
        "  obstructions:\n    - {x: 1.5, y: -6.0, width: 8.0, depth: 2.0, height: 5.0}\n")
    study.write_text(text)
    summary = run_study(study, out=folder / "kestrel.zarr", cache_dir=folder / "cache",
                        workers=1)
    assert summary.ok
    return folder / "kestrel.zarr"


@pytest.fixture(scope="module")
def report_text(tiny_store):
    return build_report(open_store(str(tiny_store)), source=str(tiny_store))


def test_variants_are_named_by_their_values(report_text):
    # orientation 90 = front façade faces east, 180 = south (CONTRACT §1 convention)
    for name in ("east · coastal · glass transmittance 0.7",
                 "south · inland · glass transmittance 0.7"):
        assert name in report_text
    visible = re.sub(r'title="[^"]*"', "", report_text)
    assert not re.search(r"\b[0-9a-f]{10,}\b", visible), "a hash is shown as a name"


def test_inputs_come_from_the_weather_file_headers(report_text):
    for path, lat, lon, zone in ((TMY3_GREENSBORO, "36.100° N", "79.950° W", "UTC−05:00"),
                                 (TMY3_SAND_POINT, "55.317° N", "160.517° W", "UTC−09:00")):
        header = _header(path)  # TMY3 line 1: station, name, state, time zone, lat, lon, elev
        assert f"{header[1]}, {header[2]}" in report_text
        assert float(header[4]) == pytest.approx(float(lat.split("°")[0]))
        assert float(header[5]) == pytest.approx(-float(lon.split("°")[0]))
        assert float(header[3]) == -float(zone[4:6])  # both sites lie west of Greenwich
        assert lat in report_text and lon in report_text and zone in report_text
    # the effective ray-tracing settings, not null: the tiny study uses subdivision 1
    assert "Tregenza, 145 patches" in report_text
    assert "null" not in report_text and "None" not in report_text


def test_cover_sketch_and_no_command_line_hints(report_text):
    for text in ("Kestrel Yard Library", "Kestrel Yard Trust", "Example Daylight Studio",
                 "2026-12-04"):
        assert text in report_text
    assert '<section class="geometry"><h2>Geometry</h2><img' in report_text
    assert "luxsweep rank" not in report_text and "--csv" not in report_text
    assert "store_series: true" not in report_text
    # EN 17037 levels explained where the table shows them
    assert "not a certificate" in report_text


@pytest.mark.skipif(find_chromium() is None, reason="chromium is not installed "
                    "(`apt-get install -y chromium`; .ci/run installs it)")
@pytest.mark.parametrize(("paper", "size"), [("a4", (595, 842)), ("letter", (612, 792))])
def test_pdf_prints_on_the_chosen_paper(tiny_store, tmp_path, cli, paper, size):
    # ISO 216 A4 is 210 × 297 mm = 595 × 842 pt; US Letter 8.5 × 11 in = 612 × 792 pt
    html = tmp_path / "r.html"
    result = cli("report", tiny_store, "--html", html, "--pdf", "--paper", paper)
    assert result.code == 0, result.err
    pdf = html.with_suffix(".pdf").read_bytes()
    assert pdf.startswith(b"%PDF")
    boxes = re.findall(rb"/MediaBox\s*\[\s*0 0 ([\d.]+) ([\d.]+)\s*\]", pdf)
    assert len(boxes) >= 2, "a report of this length spans several pages"
    for w, h in boxes:
        assert (round(float(w)), round(float(h))) == size


def test_pdf_without_chromium_is_a_plain_error(tiny_store, tmp_path, cli, monkeypatch):
    monkeypatch.setenv("LUXSWEEP_CHROMIUM", str(tmp_path / "no-such-browser"))
    result = cli("report", tiny_store, "--html", tmp_path / "r.html", "--pdf")
    assert result.code == 2
    assert "headless Chromium" in result.err and "Traceback" not in result.err
    assert not (tmp_path / "r.pdf").exists()


def test_labels_for_an_axis_that_is_not_varied_is_refused(tmp_path, cli):
    study = write_tiny_study(tmp_path, extra='labels:\n  room.windows.0.width: "w [m]"\n')
    result = cli("check", study)
    assert result.code == 2
    assert "labels.room.windows.0.width" in result.err and "line" in result.err
    assert "not a varied axis" in result.err

