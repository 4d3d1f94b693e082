"""The self-contained HTML report of a results store (``luxsweep report``).

One HTML file with every image embedded as a base64 PNG (matplotlib, no
pyplot state, no scripts, no external links), in this order:

1. a cover: the study, and the optional ``project:`` block of the study file
   (project, client, author, issue date, reference);
2. a caution (a design aid, not a certificate);
3. the summary: the best variant named by its values, how many variants meet
   the criteria, and the study at a glance;
4. the ranking table — variants named by their values (:mod:`sweep.labels`),
   time shares in percent, the EN 17037 level in words with what each level
   means, each criterion met or missed (:mod:`sweep.rank`);
5. the inputs: each weather file's site (name, latitude, longitude, time zone
   from its header), the room or mesh, reflectances, glazing sets, windows,
   grid, occupancy and the effective ray-tracing settings;
6. a geometry sketch of the best variant: plan turned to its orientation with a
   north arrow, and a section through the front window (overhang, obstructions);
7. the trade-off chart of two objectives with the Pareto set;
8. main effects: the mean of each ranked metric at each value of each axis;
9. an orientation × climate map of the first objective for the best variant's
   other choices (glazing, geometry);
10. room plans coloured by per-sensor daylight autonomy, useful daylight and
    daylight factor for the top variants, with the room outline and windows;
    for a store of several spaces instead one plan per level of the best
    variant with every space's grid coloured by daylight autonomy, walls,
    windows, internal openings (a window on a wall another space covers) and
    an arrow to north (drawn from the study text's ``spaces:``, copies
    expanded; a sensor whose space is not in the text is placed by its
    height). A store of several spaces also gets, after the ranking, a table
    of the building total then each space for the top variants, with each
    space's verdict on the criteria that name spaces. A room study (one
    space) keeps the report as it was: its table of one space would repeat
    the building row, so it is left out;
11. a day-of-year × hour-of-day map of illuminance at the sensor nearest the
    room centre for the best variant (only when the series were stored);
12. notes on the metrics.

Unit convention: shares of time (daylight autonomy, useful daylight, UDI
bands) are shown in percent of the occupied time, shares of the grid (sDA, ASE)
in percent of the sensors; the store keeps the units CONTRACT fixes (see the
variables' ``units`` attributes). A print stylesheet keeps tables and figures
whole on A4 and Letter pages; :func:`write_pdf` prints through headless
Chromium when it is installed.

Colour maps are perceptually uniform and stay readable in greyscale
(matplotlib's ``cividis``); pass/fail is shown by words and symbols, not colour
alone. The room plan is drawn from the study text: the variant's axis values
are substituted into the study's ``room`` before drawing. Plans are in the
building frame (x along the front wall, y into the room, front wall at the
bottom) with an arrow to north from the variant's orientation (DEVELOPERS.md:
site azimuth A appears at building azimuth A − orientation + 180).
"""

from __future__ import annotations

import base64
import copy
import datetime as dt
import html
import io
import os
import shutil
import subprocess
import tempfile
from pathlib import Path
from typing import Any

import matplotlib
import numpy as np
import pandas as pd
import xarray as xr
from matplotlib import colors
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle

from luxsweep.sweep import __version__, registry
from luxsweep.sweep.errors import UserInputError
from luxsweep.sweep.labels import (
    EN17037_LEVELS,
    axis_label,
    display_unit,
    format_number,
    metric_heading,
    metric_text,
    orientation_text,
    plural,
    scoped_metric,
    value_text,
    variant_name,
)
from luxsweep.sweep.rank import (
    RankSpec,
    axes_of,
    completed_mask,
    coord_values,
    criterion_text,
    main_effects,
    metric_names,
    open_store,
    pareto_front,
    rank_spec_from_store,
    rank_table,
    study_from_store,
)

__all__ = [
    "CAUTION",
    "GEOMETRY_COLUMNS",
    "GEOMETRY_NOTES",
    "NOTES",
    "PLAN_METRICS",
    "build_report",
    "find_chromium",
    "report_command",
    "resolved_study",
    "write_pdf",
]

CMAP = "cividis"
CAUTION = (
    "This report is a design aid for comparing options, not a certificate of "
    "compliance. Results come from a simulation model and its inputs (climate "
    "files, geometry, reflectances, glazing data) and carry their uncertainty. "
    "Compliance with any building code or standard rests on the applicable local "
    "codes and standards and on the judgement of a qualified professional. Glare "
    "is shown only where the study asks for it, at its view positions, and is then "
    "estimated by a simplified method (the simplified daylight glare probability, "
    "DGPs) from the vertical illuminance at the eye alone: it ignores contrast and "
    "the position of bright sources, so it under-reads glare from direct sun in "
    "view. Overheating is not assessed."
)
SCATTER_LIMIT = 2000
"""Above this many finished variants the trade-off chart shows their density."""
INCOMPLETE_ROWS = 25
"""Unfinished variants listed in the ranking table at most."""
MAX_TICKS = 7
"""Value labels per main-effect axis at most (every k-th value is labelled)."""

PLAN_METRICS = ("daylight_autonomy", "udi_useful", "daylight_factor")
"""Per-sensor results drawn on the room plans (labels and units from :mod:`sweep.registry`)."""


# ---------------------------------------------------------------------------
# small helpers


def _esc(value: Any) -> str:
    return html.escape(str(value))


def _png(fig: Figure, alt: str) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100, bbox_inches="tight")
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    return f'<img src="data:image/png;base64,{data}" alt="{_esc(alt)}">'


def _options(ds: xr.Dataset) -> dict:
    """The study's ``metric_options`` kept in the store ({} when absent: the defaults)."""
    options = study_from_store(ds).get("metric_options")
    return options if isinstance(options, dict) else {}


def _label(metric: str, options: dict | None = None) -> str:
    """Registry label with the shown unit, thresholds from ``options``."""
    metric, scope = scoped_metric(metric)
    label = registry.label(metric, options) + (f", {scope}" if scope else "")
    unit = display_unit(metric)[1]
    return f"{label} [{unit}]" if unit else label


def _plan_title(name: str, options: dict) -> str:
    """Plan title: the registry label, capitalised (``Daylight autonomy 300 lx``)."""
    text = registry.label(name, options)
    return text[:1].upper() + text[1:]


def _plan_unit(name: str) -> str:
    """Plan unit: time shares in percent of occupied time, others as shown elsewhere."""
    return "% of occupied time" if registry.METRICS[name].share else display_unit(name)[1]


def _fmt(value: Any) -> str:
    if isinstance(value, float | np.floating):
        if np.isnan(value):
            return "–"
        if float(value).is_integer() and abs(value) < 1e6:
            return str(int(value))
        return f"{value:.3g}" if abs(value) < 10 else f"{value:.1f}"
    return str(value)


def _set_path(tree: Any, path: str, value: Any) -> None:
    """Set a dotted path (``room.windows.0.width``) in a parsed study; ignore misses."""
    keys = path.split(".")
    node = tree
    for key in keys[:-1]:
        if isinstance(node, list) and key.isdigit() and int(key) < len(node):
            node = node[int(key)]
        elif isinstance(node, dict) and key in node:
            node = node[key]
        else:
            return
    last = keys[-1]
    if isinstance(node, list) and last.isdigit() and int(last) < len(node):
        node[int(last)] = value
    elif isinstance(node, dict):
        node[last] = value


def _plain(value: Any) -> Any:
    return value.item() if isinstance(value, np.generic) else value


def resolved_study(study: dict, ds: xr.Dataset, variant: int) -> dict:
    """The study with one variant's axis values substituted (for drawing only)."""
    tree = copy.deepcopy(study)
    for axis in axes_of(ds):
        _set_path(tree, axis, _plain(coord_values(ds, axis)[variant]))
        _set_named(tree, axis, _plain(coord_values(ds, axis)[variant]))
    return tree


def _sensor_xy(ds: xr.Dataset, variant: int) -> tuple[np.ndarray, np.ndarray]:
    x, y = ds["x"], ds["y"]
    if "variant" in x.dims:
        x, y = x.isel(variant=variant), y.isel(variant=variant)
    return np.asarray(x.values, float), np.asarray(y.values, float)


def _per_sensor(ds: xr.Dataset, name: str, variant: int) -> np.ndarray | None:
    if name == "udi_useful":
        if "udi_supplementary" not in ds or "udi_autonomous" not in ds:
            return None
        return (_per_sensor(ds, "udi_supplementary", variant)
                + _per_sensor(ds, "udi_autonomous", variant))
    if name not in ds or ds[name].dims != ("variant", "sensor"):
        return None
    return np.asarray(ds[name].isel(variant=variant).values, float)


def _variant_caption(row: pd.Series, axes: list[str], labels: dict[str, str] | None = None
                     ) -> str:
    return variant_name({a: _plain(row[a]) for a in axes}, axes, labels)


# ---------------------------------------------------------------------------
# sections


def _labels(study: dict) -> dict[str, str]:
    labels = study.get("labels")
    return {str(k): str(v) for k, v in labels.items()} if isinstance(labels, dict) else {}


def _row_values(row: pd.Series, axes: list[str]) -> dict[str, Any]:
    return {a: _plain(row[a]) for a in axes}


def _name_of(row: pd.Series, axes: list[str], labels: dict[str, str]) -> str:
    return variant_name(_row_values(row, axes), axes, labels)


def _project_block(study: dict) -> str:
    project = study.get("project") if isinstance(study.get("project"), dict) else {}
    fields = (("Project", "project"), ("Client", "client"), ("Prepared by", "author"),
              ("Issue date", "issue_date"), ("Reference", "reference"))
    rows = [(k, project[f]) for k, f in fields if project.get(f) not in (None, "")]
    if not rows:
        return ""
    return '<dl class="cover">' + "".join(
        f"<div><dt>{_esc(k)}</dt><dd>{_esc(v)}</dd></div>" for k, v in rows) + "</dl>"


def _summary(ds: xr.Dataset, study: dict, source: str | None, table: pd.DataFrame,
             spec: RankSpec) -> str:
    done = completed_mask(ds)
    axes = axes_of(ds)
    labels = _labels(study)
    ranked = table[table["status"] != "incomplete"]
    findings = []
    if ranked.empty:
        findings.append("No variant has finished yet; run the study to completion.")
    else:
        best = ranked.iloc[0]
        metrics = spec.columns or [m for m in ("sda", "ase", "udi_useful_mean") if m in table]
        values = ", ".join(f"{metric_heading(m).split(' [')[0]} {metric_text(m, best[m])}"
                           + (f" {display_unit(m)[1]}" if display_unit(m)[1] and
                              m != "en17037_level" else "")
                           for m in metrics if m in best.index)
        if spec.require:
            n_pass = int((ranked["status"] == "pass").sum())
            findings.append(f"{plural(n_pass, 'variant')} of {len(ranked):,} meet every "
                            "criterion." if n_pass != 1 else
                            f"1 variant of {len(ranked):,} meets every criterion.")
            lead = "Best variant" if n_pass else "Closest variant (misses a criterion)"
        else:
            findings.append("No criteria were given: variants are ordered by "
                            + ("their score." if spec.prefer else "their order in the study."))
            lead = "First variant"
        findings.append(f"{lead}: <strong>{_esc(_name_of(best, axes, labels))}</strong>"
                        + (f" — {_esc(values)}." if values else "."))
        findings += _geometry_line(ds, int(best["variant"]))
    rows = [
        ("Study", study.get("name") or ds.attrs.get("study_name", "(unnamed)")),
        ("Variants", f"{int(done.sum()):,} of {done.size:,} computed"
         + ("" if done.all() else f" ({done.size - int(done.sum()):,} not finished)")),
    ]
    for axis in axes:
        values = pd.unique(pd.Series(coord_values(ds, axis)))
        rows.append((f"Varied: {axis_label(axis, labels)}",
                     ", ".join(value_text(axis, v) for v in values)))
    rows.append(("Computed", _when(ds, source)))
    rows.append(("Computed with", f"luxsweep {ds.attrs.get('luxsweep_version', '?')}"))
    rows.append(("Report made", f"{dt.datetime.now().strftime('%Y-%m-%d %H:%M')} "
                                f"with luxsweep {__version__}"))
    body = "".join(f"<tr><th>{_esc(k)}</th><td>{_esc(v)}</td></tr>" for k, v in rows)
    return ("".join(f"<p>{f}</p>" for f in findings)
            + f'<table class="facts">{body}</table>')


def _when(ds: xr.Dataset, source: str | None) -> str:
    for key in ("finished_at", "computed_at", "created_at", "created"):
        if ds.attrs.get(key):
            return str(ds.attrs[key])
    if source and Path(source).exists():
        latest = max((p.stat().st_mtime for p in Path(source).rglob("*") if p.is_file()),
                     default=Path(source).stat().st_mtime)
        return dt.datetime.fromtimestamp(latest).strftime("%Y-%m-%d %H:%M") + " (last write)"
    return "unknown"


def _ranking(table: pd.DataFrame, spec: RankSpec, axes: list[str], labels: dict[str, str],
             top: int = 25, options: dict | None = None) -> str:
    ranked = table[table["status"] != "incomplete"].head(top)
    n_incomplete = int((table["status"] == "incomplete").sum())
    incomplete = table[table["status"] == "incomplete"].head(INCOMPLETE_ROWS)
    metrics = spec.columns or [m for m in ("sda", "ase", "udi_useful_mean") if m in table]
    head = ["Rank", "Variant",
            *[f'<span title="{_esc(_label(m, options))}">{_esc(metric_heading(m, options))}</span>'
              for m in metrics]]
    if spec.prefer:
        head += ["Score (0–1)", "Pareto set"]
    if spec.require:
        head += ["Criteria"]
    out = ['<table class="rank"><thead><tr>']
    out += [f"<th>{h}</th>" for h in head]
    out.append("</tr></thead><tbody>")
    for _, row in pd.concat([ranked, incomplete]).iterrows():
        status = row["status"]
        name = _esc(_name_of(row, axes, labels))
        cells = [format_number(row["rank"]) if status != "incomplete" else "–",
                 f'<span title="variant id {_esc(row["variant_id"])}">{name}</span>']
        cells += [_esc(metric_text(m, row.get(m, np.nan))) for m in metrics]
        if spec.prefer:
            cells += [_esc(format_number(row["score"])), "◆ yes" if row["pareto"] else ""]
        if status == "incomplete":
            verdict = '<span class="incomplete">not finished – not ranked</span>'
        elif status == "pass":
            verdict = '<span class="pass">✓ all met</span>'
        else:
            missed = [criterion_text(r) for r in spec.require
                      if r.label in str(row["failed"]).split("; ")]
            verdict = f'<span class="fail">✗ misses {_esc("; ".join(missed))}</span>'
        if spec.require or status == "incomplete":
            cells.append(verdict)
        out.append(f'<tr class="{status}">' + "".join(f"<td>{c}</td>" for c in cells) + "</tr>")
    out.append("</tbody></table>")
    n_ranked = int((table["status"] != "incomplete").sum())
    note = []
    if n_ranked > top:
        note.append(f"The best {top} of {n_ranked:,} ranked variants are shown; the ranking "
                    "file beside this report lists them all.")
    if n_incomplete > INCOMPLETE_ROWS:
        note.append(f"{INCOMPLETE_ROWS} of the {n_incomplete:,} unfinished variants are "
                    "shown.")
    crit = "; ".join(criterion_text(r) for r in spec.require) or "none given"
    pref = "; ".join(f"{metric_heading(o.column)} ({'higher' if o.goal == 'max' else 'lower'}"
                     f" is better, weight {o.weight:g})" for o in spec.prefer) or "none given"
    note.append(f"Criteria: {crit}. Objectives: {pref}. Shares of time and of the grid "
                "are in percent.")
    if "en17037_level" in metrics:
        note.append("EN 17037 daylight provision levels: " + "; ".join(
            f"{k} {word} – {meaning}" for k, (word, meaning) in EN17037_LEVELS.items()) + ".")
    return "".join(out) + "".join(f'<p class="note">{_esc(n)}</p>' for n in note)


# ---------------------------------------------------------------------------
# inputs and geometry


def _table(head: list[str], rows: list[list[Any]], cls: str = "inputs") -> str:
    out = [f'<table class="{cls}"><thead><tr>']
    out += [f"<th>{_esc(h)}</th>" for h in head]
    out.append("</tr></thead><tbody>")
    for r in rows:
        out.append("<tr>" + "".join(f"<td>{_esc(c)}</td>" for c in r) + "</tr>")
    out.append("</tbody></table>")
    return "".join(out)


def _utc(offset: Any) -> str:
    try:
        h = float(offset)
    except (TypeError, ValueError):
        return "?"
    sign = "+" if h >= 0 else "−"
    minutes = round(abs(h) * 60)
    return f"UTC{sign}{minutes // 60:02d}:{minutes % 60:02d}"


def _latlon(value: Any, pos: str, neg: str) -> str:
    try:
        v = float(value)
    except (TypeError, ValueError):
        return "?"
    return f"{abs(v):.3f}° {pos if v >= 0 else neg}"


_SUBDIVISION_WORDS = {1: "Tregenza, 145 patches"}


def _subdivision(n: Any) -> str:
    try:
        k = int(n)
    except (TypeError, ValueError):
        return str(n)
    return _SUBDIVISION_WORDS.get(k, f"Reinhart subdivision {k}, {144 * k * k + 1:,} patches")


_COMPUTE_WORDS = (
    ("subdivision", "sky patches", _subdivision),
    ("sun_spacing", "sun-point spacing", lambda v: f"{format_number(v)}°"),
    ("reflected_sun_spacing", "sun-point spacing for reflected sun",
     lambda v: f"{format_number(v)}°"),
    ("sky_rays_per_patch", "rays per sky patch and sensor", format_number),
    ("ground_rays", "rays to the ground per sensor", format_number),
    ("element_size", "surface element size", lambda v: f"{format_number(v)} m"),
    ("element_rays", "rays per surface element", format_number),
    ("sensor_rays", "rays per sensor for reflected light", format_number),
    ("seed", "random seed", format_number),
    ("max_elements", "surface elements at most (larger elements beyond)", format_number),
    ("memory_limit", "memory per coefficient set at most",
     lambda v: f"{format_number(v)} GiB"),
    ("target_error", "target relative sampling error",
     lambda v: "off" if not v else f"{format_number(100 * float(v))} %"),
)


def _inputs(ds: xr.Dataset, study: dict) -> str:
    record = ds.attrs.get("inputs") if isinstance(ds.attrs.get("inputs"), dict) else {}
    parts = []
    climates = study.get("climates") or {}
    sites = record.get("climates") or {}
    rows = []
    for label, path in climates.items():
        site = sites.get(label) or {}
        rows.append([label, site.get("site", "not recorded"),
                     _latlon(site.get("latitude"), "N", "S"),
                     _latlon(site.get("longitude"), "E", "W"), _utc(site.get("utc_offset")),
                     Path(str(path)).name])
    if rows:
        parts.append("<h3>Climates</h3>" + _table(
            ["Label", "Site (weather file header)", "Latitude", "Longitude",
             "Standard time", "File"], rows))
    room = study.get("room")
    if study.get("vary") or study.get("vary_together"):
        parts.append('<p class="note">The tables show the study file as written; each '
                     "variant replaces the varied values (listed in the summary).</p>")
    if isinstance(room, dict):
        refl = room.get("reflectance") or {}
        facts = [
            ["Room (width × depth × height)", " × ".join(
                format_number(room.get(k, "?")) for k in ("width", "depth", "height")) + " m"],
            ["Wall thickness", f"{format_number(room.get('thickness', 0.0))} m"],
            ["Reflectances", ", ".join(f"{k} {format_number(v)}" for k, v in refl.items())
             or "defaults"],
            ["Ground reflectance", format_number(study.get("ground_reflectance", 0.2))],
        ]
        if isinstance(room.get("overhang"), dict):
            oh = room["overhang"]
            facts.append(["Overhang over the front windows",
                          f"depth {format_number(oh.get('depth'))} m, "
                          f"{format_number(oh.get('gap', 0))} m above the window head"])
        obstructions = study.get("obstructions") or room.get("obstructions") or []
        for i, ob in enumerate(obstructions):
            if isinstance(ob, dict):
                facts.append([f"Obstruction {i + 1}", ", ".join(
                    f"{k} {format_number(v)} m" for k, v in ob.items())])
        parts.append("<h3>Room</h3>" + _table(["Item", "Value"], facts))
        windows = [[i + 1, w.get("wall", "?"), *(
            format_number(w.get(k)) if w.get(k) is not None else "–"
            for k in ("width", "sill", "head", "offset")), w.get("glazing", "?")]
            for i, w in enumerate(room.get("windows") or []) if isinstance(w, dict)]
        if windows:
            parts.append("<h3>Windows</h3>" + _table(
                ["#", "Wall", "Width [m]", "Sill [m]", "Head [m]",
                 "Offset from wall centre [m]", "Glazing set"], windows))
    elif study.get("mesh"):
        mats = study.get("materials") or {}
        parts.append("<h3>Room (mesh)</h3>" + _table(
            ["OBJ group", "Material"],
            [[g, f"glazing set {m['glazing']}" if m.get("glazing") else
              f"reflectance {format_number(m.get('reflectance'))}"]
             for g, m in mats.items() if isinstance(m, dict)]))
    glazings = study.get("glazings") or {}
    if glazings:
        parts.append("<h3>Glazing sets</h3>" + _table(
            ["Set", "Normal transmittance", "Panes", "With shading closed"],
            [[name, format_number(g.get("transmittance")), format_number(g.get("panes", 1)),
              format_number(g.get("shaded_transmittance")) if g.get(
                  "shaded_transmittance") is not None else "no operable shading"]
             for name, g in glazings.items() if isinstance(g, dict)]))
    grid = study.get("grid") if isinstance(study.get("grid"), dict) else {}
    occ = study.get("occupancy") if isinstance(study.get("occupancy"), dict) else {}
    other = [
        ["Sensor grid", f"{format_number(grid.get('height', 0.8))} m above the floor, "
                        f"{format_number(grid.get('spacing', 0.5))} m spacing, "
                        f"{format_number(grid.get('margin', 0.5))} m from the walls"
         + (f"; {ds.sizes['sensor']:,} sensors" if "sensor" in ds.sizes else "")],
        ["Occupied", f"{occ.get('start', '08:00')}–{occ.get('end', '18:00')} local standard "
                     f"time, {'every day' if occ.get('days') == 'all' else 'weekdays'}"],
        ["Time step", f"{format_number(study.get('timestep', 60))} min"],
    ]
    parts.append("<h3>Grid, occupancy and time</h3>" + _table(["Item", "Value"], other))
    compute = record.get("compute") or {}
    if compute:
        rows = [[words, fmt(compute[key])] for key, words, fmt in _COMPUTE_WORDS
                if key in compute]
        rows += [[k.replace("_", " "), format_number(v)] for k, v in compute.items()
                 if k not in {c[0] for c in _COMPUTE_WORDS}]
        parts.append("<h3>Ray-tracing settings (as used)</h3>" + _table(["Setting", "Value"],
                                                                        rows))
    else:
        parts.append('<p class="note">This store does not record the ray-tracing settings '
                     "it was computed with (it predates that record).</p>")
    return "".join(parts)


def _rotate(x: Any, y: Any, orientation: float) -> tuple[np.ndarray, np.ndarray]:
    """Building-frame plan coordinates turned into the site frame (north up).

    A building azimuth B is site azimuth B + orientation − 180 (DEVELOPERS.md), a
    clockwise turn by θ = orientation − 180.
    """
    t = np.radians(orientation - 180.0)
    x, y = np.asarray(x, float), np.asarray(y, float)
    return x * np.cos(t) + y * np.sin(t), -x * np.sin(t) + y * np.cos(t)


def _window_segments(room: dict) -> list[tuple[str, float, float, dict]]:
    """(wall, start, end, window) along each wall for the wall windows of a room."""
    w, d = float(room["width"]), float(room["depth"])
    out = []
    for win in room.get("windows") or []:
        if not isinstance(win, dict) or win.get("wall") not in ("front", "back", "left",
                                                                 "right"):
            continue
        length = w if win["wall"] in ("front", "back") else d
        c = length / 2 + float(win.get("offset", 0.0) or 0.0)
        out.append((win["wall"], c - float(win["width"]) / 2, c + float(win["width"]) / 2, win))
    return out


def _sketch_plan(ax: Any, study: dict, orientation: float) -> None:
    room = study["room"]
    w, d = float(room["width"]), float(room["depth"])
    t = float(room.get("thickness", 0.0) or 0.0)

    def poly(xs: list[float], ys: list[float], **kw: Any) -> None:
        px, py = _rotate(xs, ys, orientation)
        ax.fill(px, py, **kw)

    outer = t if t > 0 else 0.12
    poly([-outer, w + outer, w + outer, -outer], [-outer, -outer, d + outer, d + outer],
         fc="0.25", ec="black", lw=0.8)
    poly([0, w, w, 0], [0, 0, d, d], fc="white", ec="black", lw=0.8)
    for wall, a, b, _ in _window_segments(room):
        if wall in ("front", "back"):
            yy = (-outer, 0) if wall == "front" else (d, d + outer)
            poly([a, b, b, a], [yy[0], yy[0], yy[1], yy[1]], fc="#7fb3e6", ec="#1f5f99", lw=1)
        else:
            xx = (-outer, 0) if wall == "left" else (w, w + outer)
            poly([xx[0], xx[1], xx[1], xx[0]], [a, a, b, b], fc="#7fb3e6", ec="#1f5f99", lw=1)
    for win in room.get("windows") or []:
        if isinstance(win, dict) and win.get("wall") == "roof":
            cx, cy = float(win["x"]), float(win["y"])
            hw, hl = float(win["width"]) / 2, float(win["length"]) / 2
            poly([cx - hw, cx + hw, cx + hw, cx - hw], [cy - hl, cy - hl, cy + hl, cy + hl],
                 fc="none", ec="#1f5f99", lw=1.2, ls="--")
    if isinstance(room.get("overhang"), dict):
        depth = float(room["overhang"].get("depth", 0.0))
        for wall, a, b, _ in _window_segments(room):
            if wall == "front" and depth > 0:
                poly([a, b, b, a], [-outer - depth, -outer - depth, -outer, -outer],
                     fc="none", ec="0.35", lw=1, hatch="///")
    for ob in study.get("obstructions") or room.get("obstructions") or []:
        if isinstance(ob, dict):
            cx, cy = float(ob["x"]), float(ob["y"])
            hw, hd = float(ob["width"]) / 2, float(ob["depth"]) / 2
            poly([cx - hw, cx + hw, cx + hw, cx - hw], [cy - hd, cy - hd, cy + hd, cy + hd],
                 fc="0.8", ec="0.3", lw=1)
            px, py = _rotate([cx], [cy], orientation)
            ax.text(px[0], py[0], f"{format_number(ob['height'])} m high", ha="center",
                    va="center", fontsize=7)
    fx, fy = _rotate([w / 2], [-outer - 0.9], orientation)
    ax.text(fx[0], fy[0], "front", ha="center", va="center", fontsize=8)
    ax.set_aspect("equal")
    ax.autoscale_view()
    x0, x1 = ax.get_xlim()
    y0, y1 = ax.get_ylim()
    span = max(x1 - x0, y1 - y0)
    ax.annotate("", xy=(x1 + 0.08 * span, y1), xytext=(x1 + 0.08 * span, y1 - 0.15 * span),
                arrowprops={"arrowstyle": "-|>", "color": "black", "lw": 1.5},
                annotation_clip=False)
    ax.text(x1 + 0.08 * span, y1 + 0.04 * span, "N", ha="center", va="bottom", fontsize=10,
            fontweight="bold")
    ax.set_xlim(x0 - 0.05 * span, x1 + 0.15 * span)
    ax.set_ylim(y0 - 0.05 * span, y1 + 0.12 * span)
    ax.set_xlabel("east [m]")
    ax.set_ylabel("north [m]")
    ax.set_title(f"Plan, north up (front façade faces {orientation_text(orientation)})",
                 fontsize=10)


def _sketch_section(ax: Any, study: dict) -> None:
    """A section through the room at the middle of the first front window (y, z)."""
    room = study["room"]
    d, h = float(room["depth"]), float(room["height"])
    t = float(room.get("thickness", 0.0) or 0.0)
    outer = t if t > 0 else 0.12
    ax.fill([-outer, d + outer, d + outer, -outer], [-outer, -outer, h + outer, h + outer],
            fc="0.25", ec="black", lw=0.8)
    ax.fill([0, d, d, 0], [0, 0, h, h], fc="white", ec="black", lw=0.8)
    segments = _window_segments(room)
    front = [s for s in segments if s[0] == "front"]
    cut = (front[0][1] + front[0][2]) / 2 if front else float(room["width"]) / 2
    for wall, a, b, win in segments:
        if wall not in ("front", "back") or not (a <= cut <= b):
            continue
        sill, head = float(win.get("sill", 0.0)), float(win.get("head", 0.0))
        yy = (-outer, 0) if wall == "front" else (d, d + outer)
        ax.fill([yy[0], yy[1], yy[1], yy[0]], [sill, sill, head, head], fc="#7fb3e6",
                ec="#1f5f99", lw=1)
        if wall == "front" and isinstance(room.get("overhang"), dict):
            oh = room["overhang"]
            z = head + float(oh.get("gap", 0.0))
            ax.fill([-outer - float(oh.get("depth", 0.0)), -outer, -outer,
                     -outer - float(oh.get("depth", 0.0))], [z, z, z + 0.05, z + 0.05],
                    fc="0.35", ec="black", lw=0.8)
    grid = study.get("grid") if isinstance(study.get("grid"), dict) else {}
    gz = float(grid.get("height", 0.8))
    ax.plot([0, d], [gz, gz], ls=":", color="#b35900", lw=1.2)
    ax.text(d / 2, gz + 0.08, f"sensor grid {format_number(gz)} m", ha="center", fontsize=7,
            color="#b35900")
    far = 0.0
    for ob in study.get("obstructions") or room.get("obstructions") or []:
        if not isinstance(ob, dict):
            continue
        if abs(float(ob["x"]) - cut) <= float(ob["width"]) / 2 and float(ob["y"]) < 0:
            y0 = float(ob["y"]) - float(ob["depth"]) / 2
            y1 = float(ob["y"]) + float(ob["depth"]) / 2
            ax.fill([y0, y1, y1, y0], [0, 0, float(ob["height"]), float(ob["height"])],
                    fc="0.8", ec="0.3", lw=1)
            far = min(far, y0)
    ax.axhline(0.0 - outer, color="0.5", lw=0.8)
    ax.set_aspect("equal")
    ax.set_xlim(min(far, -outer - 1.0) - 0.3, d + outer + 0.5)
    ax.set_xlabel("distance into the room from the front wall [m] (outside is negative)")
    ax.set_ylabel("height [m]")
    ax.set_title(f"Section through the front window (x = {format_number(cut)} m)",
                 fontsize=10)


def _mesh_plan(ax: Any, study: dict, folder: Path | None, orientation: float) -> bool:
    """Outline a mesh room's floor groups and glazing in plan; False if the mesh is unreadable."""
    from luxsweep.kernels.geometry import read_obj

    mesh = Path(str(study.get("mesh", "")))
    if not mesh.is_absolute() and folder is not None:
        mesh = folder / mesh
    mats = {g: dict(m) for g, m in (study.get("materials") or {}).items() if isinstance(m, dict)}
    try:
        geometry = read_obj(mesh, mats)
    except Exception:  # the sketch is optional: a moved or edited mesh only loses the drawing
        return False
    floors = set((study.get("grid") or {}).get("floors") or [])
    glazing = np.array([m.kind == "glazing" for m in geometry.materials])[geometry.material]
    floor = np.array([n in floors for n in geometry.group_names])[geometry.group]
    for k, t in enumerate(geometry.triangles):
        if floor[k] or glazing[k]:
            px, py = _rotate(t[:, 0], t[:, 1], orientation)
            if floor[k]:
                ax.fill(px, py, fc="0.88", ec="0.6", lw=0.3)
            else:
                ax.fill(px, py, fc="none", ec="#1f5f99", lw=1.5)
    ax.set_aspect("equal")
    ax.set_title(f"Plan of the mesh, north up (front faces {orientation_text(orientation)}): "
                 "grey floor groups, blue glazing", fontsize=10)
    return True


def _geometry_sketch(ds: xr.Dataset, table: pd.DataFrame, study: dict,
                     source: str | None) -> str:
    done = table[table["status"] != "incomplete"]
    axes = axes_of(ds)
    labels = _labels(study)
    if done.empty:
        tree, caption = study, "the study as written"
    else:
        best = done.iloc[0]
        tree = resolved_study(study, ds, int(best["variant"]))
        caption = f"the first-ranked variant ({_name_of(best, axes, labels)})"
    orientation = float(tree.get("orientation", 180.0) or 0.0)
    room = tree.get("room")
    if isinstance(room, dict):
        try:
            fig = Figure(figsize=(11.0, 4.6))
            left, right = fig.subplots(1, 2, gridspec_kw={"width_ratios": [1.0, 1.15]})
            _sketch_plan(left, tree, orientation)
            _sketch_section(right, tree)
            fig.tight_layout()
        except (KeyError, TypeError, ValueError):
            return '<p class="note">The room in the study text could not be drawn.</p>'
    elif tree.get("mesh"):
        folder = None
        if ds.attrs.get("study_file"):
            folder = Path(str(ds.attrs["study_file"])).parent
        elif source:
            folder = Path(source).parent
        fig = Figure(figsize=(7.0, 5.5))
        if not _mesh_plan(fig.add_subplot(), tree, folder, orientation):
            return ('<p class="note">The mesh file of this study could not be read from '
                    "here, so no sketch is drawn.</p>")
    else:
        return '<p class="note">No room in the study text: no sketch.</p>'
    return (_png(fig, "geometry sketch: plan and section")
            + f'<p class="note">Geometry of {_esc(caption)}. Blue: glazing; hatched: '
              "overhang; light grey: obstructions with their height; dotted: the sensor "
              "grid. The arrow points to north.</p>")


def _objective_pair(spec: RankSpec, names: list[str]) -> list[tuple[str, str]]:
    pair = [(o.column, o.goal) for o in spec.prefer]
    for name, goal in (("sda", "max"), ("ase", "min"), ("udi_useful_mean", "max"),
                       ("daylight_factor_mean", "max")):
        if len(pair) >= 2:
            break
        if name in names and name not in [p[0] for p in pair]:
            pair.append((name, goal))
    return pair[:2]


def _column_values(ds: xr.Dataset, table: pd.DataFrame, column: str) -> np.ndarray:
    """A ranking column per store variant: the store variable, or an objective scoped
    to spaces (:attr:`sweep.rank.Objective.column`) as the ranking table holds it."""
    if column in ds.data_vars:
        return np.asarray(ds[column].values, float)
    out = np.full(ds.sizes["variant"], np.nan)
    out[table["variant"].to_numpy()] = table[column].to_numpy(dtype=float)
    return out


def _pareto_chart(ds: xr.Dataset, table: pd.DataFrame, spec: RankSpec) -> str:
    pair = _objective_pair(spec, metric_names(ds))
    done = table[table["status"] != "incomplete"]
    if len(pair) < 2 or done.empty:
        return '<p class="note">Fewer than two metrics to compare: no trade-off chart.</p>'
    (mx, gx), (my, gy) = pair
    x = _column_values(ds, table, mx)[done["variant"]] * display_unit(mx)[0]
    y = _column_values(ds, table, my)[done["variant"]] * display_unit(my)[0]
    ok = (done["status"] == "pass").to_numpy()
    front = np.zeros(len(done), bool)
    if ok.any():
        front[ok] = pareto_front(np.column_stack([x[ok], y[ok]]), [gx, gy])
    fig = Figure(figsize=(11.0, 5.6))
    ax = fig.add_subplot()
    dense = len(done) > SCATTER_LIMIT
    if dense:  # thousands of markers hide each other: show how many fall where
        finite = np.isfinite(x) & np.isfinite(y)
        cells = ax.hexbin(x[finite], y[finite], gridsize=40, bins="log", cmap="Greys",
                          mincnt=1, linewidths=0)
        fig.colorbar(cells, ax=ax, label="variants per hexagon (log scale)")
    else:
        ax.scatter(x[~ok], y[~ok], s=36, facecolors="none", edgecolors="0.45",
                   label="misses a criterion")
        ax.scatter(x[ok & ~front], y[ok & ~front], s=36, color="#3b4d6b",
                   label="meets every criterion")
    if front.any():
        order = np.argsort(x[front])
        ax.plot(x[front][order], y[front][order], "-", color="#d4a017", lw=1.5, zorder=1)
        ax.scatter(x[front], y[front], s=110, marker="D", color="#d4a017", edgecolors="black",
                   zorder=3, label="Pareto set (no other passing variant is better on both)")
    ranks = done["rank"].to_numpy()
    for k in range(min(5, len(ranks))):  # rows are in rank order; labels fan out downwards
        ax.annotate(f"#{ranks[k]}", (x[k], y[k]), textcoords="offset points", fontsize=9,
                    xytext=(10 + 14 * k, -16 - 12 * k),
                    arrowprops={"arrowstyle": "-", "lw": 0.5, "color": "0.3"})
    options = _options(ds)
    ax.set_xlabel(f"{_label(mx, options)} – {'higher' if gx == 'max' else 'lower'} is better")
    ax.set_ylabel(f"{_label(my, options)} – {'higher' if gy == 'max' else 'lower'} is better")
    ax.grid(alpha=0.3)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, frameon=True)
    fig.tight_layout()
    shown = ", ".join(f"#{r}" for r in ranks[:5])
    if dense:
        note = (f"{len(done):,} finished variants, too many to draw one by one: the grey "
                "hexagons count the variants (passing or not) that fall in each; diamonds "
                "joined by a line are the Pareto set, drawn individually. Labels mark the "
                f"first-ranked variants ({shown}).")
    else:
        note = ("Each point is a finished variant; filled points meet every criterion, open "
                "ones miss at least one; diamonds joined by a line are the Pareto set. Labels "
                f"mark the first-ranked variants ({shown}).")
    return _png(fig, f"trade-off between {mx} and {my}") + f'<p class="note">{_esc(note)}</p>'


def _main_effect_plots(ds: xr.Dataset, spec: RankSpec, labels: dict[str, str]) -> str:
    axes = axes_of(ds)
    names = metric_names(ds)
    metrics = spec.metrics or [m for m in ("sda", "ase", "udi_useful_mean") if m in names]
    metrics = metrics[:4]
    if not axes or not metrics or not completed_mask(ds).any():
        return '<p class="note">No varied axes or no finished variants: no main effects.</p>'
    fig = Figure(figsize=(11.0, 2.7 * len(metrics) + 0.6))
    grid = fig.subplots(len(metrics), len(axes), squeeze=False, sharey="row")
    for i, metric in enumerate(metrics):
        effects = main_effects(ds, metric)
        scale = display_unit(metric)[0]
        effects = effects.assign(mean=effects["mean"] * scale, effect=effects["effect"] * scale)
        grand = float((effects["mean"] - effects["effect"]).iloc[0]) if len(effects) else 0.0
        for j, axis in enumerate(axes):
            ax = grid[i, j]
            e = effects[effects["axis"] == axis]
            pos = np.arange(len(e))
            ax.axhline(grand, color="0.5", lw=1, ls="--")
            ax.plot(pos, e["mean"], "o-", color="#3b4d6b")
            ticks = [value_text(axis, v).replace("-", "-\n", 1) if len(str(v)) > 9 else
                     value_text(axis, v) for v in e["value"]]
            every = max(1, -(-len(e) // MAX_TICKS))  # label every k-th value when many
            ax.set_xticks(pos[::every], ticks[::every], fontsize=8)
            ax.set_xlim(-0.5, len(e) - 0.5)
            ax.tick_params(axis="y", labelsize=8)
            ax.grid(alpha=0.3)
            if i == len(metrics) - 1:
                ax.set_xlabel(axis_label(axis, labels), fontsize=9)
            if j == 0:
                ax.set_ylabel(metric_heading(metric, _options(ds)), fontsize=8)
    fig.tight_layout()
    return (_png(fig, "main effects")
            + '<p class="note">Each row is a metric and each column a varied choice: the '
              "points are the mean over the finished variants at each value of that choice; "
              "the dashed line is the mean of all finished variants.</p>")


def _orientation_climate_map(ds: xr.Dataset, table: pd.DataFrame, spec: RankSpec,
                             labels: dict[str, str]) -> str:
    axes = axes_of(ds)
    names = metric_names(ds)
    metric = next((o.column for o in spec.prefer),
                  next((m for m in ("sda", "udi_useful_mean") if m in names), None))
    done = table[table["status"] != "incomplete"]
    if metric is None or done.empty:
        return '<p class="note">No finished variants: no orientation and climate map.</p>'
    if "orientation" not in axes and "climate" not in axes:
        return ('<p class="note">Neither orientation nor climate is varied in this study: '
                "no orientation and climate map.</p>")
    best = done.iloc[0]
    others = [a for a in axes if a not in ("orientation", "climate")]
    sel = done
    for a in others:
        sel = sel[sel[a] == best[a]]
    values = _column_values(ds, table, metric) * display_unit(metric)[0]
    sel = sel.assign(value=values[sel["variant"]])
    rows = sorted(pd.unique(sel["orientation"])) if "orientation" in axes else ["(fixed)"]
    cols = list(pd.unique(sel["climate"])) if "climate" in axes else ["(fixed)"]
    grid = np.full((len(rows), len(cols)), np.nan)
    for _, r in sel.iterrows():
        i = rows.index(r["orientation"]) if "orientation" in axes else 0
        j = cols.index(r["climate"]) if "climate" in axes else 0
        grid[i, j] = r["value"]
    fig = Figure(figsize=(max(6.0, 1.8 * len(cols) + 3.5), 0.55 * len(rows) + 1.8))
    ax = fig.add_subplot()
    im = ax.imshow(grid, cmap=CMAP, aspect="auto")
    span = np.nanmax(grid) - np.nanmin(grid) if np.isfinite(grid).any() else 0
    for i in range(len(rows)):
        for j in range(len(cols)):
            if np.isfinite(grid[i, j]):
                level = (grid[i, j] - np.nanmin(grid)) / span if span > 0 else 1.0
                ax.text(j, i, _fmt(grid[i, j]), ha="center", va="center", fontsize=10,
                        color="black" if level > 0.5 else "white")
            else:
                ax.text(j, i, "not finished", ha="center", va="center", fontsize=8,
                        color="0.3")
    ax.set_xticks(range(len(cols)), [str(c) for c in cols])
    ax.set_yticks(range(len(rows)), [orientation_text(r) if r != "(fixed)" else r
                                     for r in rows])
    ax.set_xlabel("climate")
    ax.set_ylabel("front façade faces")
    fig.colorbar(im, ax=ax, label=metric_heading(metric, _options(ds)))
    fig.tight_layout()
    fixed = ", ".join(f"{axis_label(a, labels)} {value_text(a, best[a])}" for a in others) or (
        "no other choices varied")
    return (_png(fig, f"{metric} by orientation and climate")
            + f'<p class="note">{_esc(_label(metric, _options(ds)))} for each orientation and '
              f"climate, with the other choices of the first-ranked variant: {_esc(fixed)}.</p>")


def _draw_room(ax: Any, room: dict | None) -> None:
    if not isinstance(room, dict):
        return
    try:
        w, d = float(room["width"]), float(room["depth"])
    except (KeyError, TypeError, ValueError):
        return
    ax.add_patch(Rectangle((0, 0), w, d, fill=False, lw=2, ec="black"))
    for win in room.get("windows") or []:
        try:
            wall, width = win.get("wall"), float(win["width"])
            off = float(win.get("offset", 0.0) or 0.0)
        except (AttributeError, KeyError, TypeError, ValueError):
            continue
        if wall in ("front", "back"):
            c = w / 2 + off
            yy = 0.0 if wall == "front" else d
            ax.plot([c - width / 2, c + width / 2], [yy, yy], color="white", lw=6,
                    solid_capstyle="butt")
            ax.plot([c - width / 2, c + width / 2], [yy, yy], color="#1f77b4", lw=3,
                    solid_capstyle="butt")
        elif wall in ("left", "right"):
            c = d / 2 + off
            xx = 0.0 if wall == "left" else w
            ax.plot([xx, xx], [c - width / 2, c + width / 2], color="white", lw=6,
                    solid_capstyle="butt")
            ax.plot([xx, xx], [c - width / 2, c + width / 2], color="#1f77b4", lw=3,
                    solid_capstyle="butt")
        elif wall == "roof":
            try:
                length, cx, cy = float(win["length"]), float(win["x"]), float(win["y"])
            except (KeyError, TypeError, ValueError):
                continue
            ax.add_patch(Rectangle((cx - width / 2, cy - length / 2), width, length,
                                   fill=False, ls="--", lw=1.5, ec="white"))
    ax.set_xlim(-0.4, w + 1.3)
    ax.set_ylim(-0.9, d + 0.4)
    ax.text(w / 2, -0.45, "front façade", ha="center", va="center", fontsize=7)


def _north_arrow(ax: Any, orientation: float | None, at: tuple[float, float]) -> None:
    """An arrow to site north centred at ``at`` [m, building frame]."""
    if orientation is None:
        return
    az = np.radians(180.0 - orientation)  # building azimuth of site north
    dx, dy = 0.35 * np.sin(az), 0.35 * np.cos(az)
    cx, cy = at
    ax.annotate("", xy=(cx + dx, cy + dy), xytext=(cx - dx, cy - dy),
                arrowprops={"arrowstyle": "-|>", "color": "black", "lw": 1.4})
    ax.text(cx, cy + 0.65, "N", ha="center", va="center", fontsize=8)


def _field(ax: Any, x: np.ndarray, y: np.ndarray, v: np.ndarray, norm: Any) -> Any:
    ok = np.isfinite(x) & np.isfinite(y) & np.isfinite(v)
    x, y, v = x[ok], y[ok], v[ok]
    ux, uy = np.unique(np.round(x, 6)), np.unique(np.round(y, 6))
    if len(ux) * len(uy) == len(v) and len(ux) > 1 and len(uy) > 1:
        img = np.full((len(uy), len(ux)), np.nan)
        img[np.searchsorted(uy, np.round(y, 6)), np.searchsorted(ux, np.round(x, 6))] = v

        def edges(c: np.ndarray) -> np.ndarray:
            mid = (c[1:] + c[:-1]) / 2
            return np.concatenate([[c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]])

        return ax.pcolormesh(edges(ux), edges(uy), img, cmap=CMAP, norm=norm)
    return ax.scatter(x, y, c=v, cmap=CMAP, norm=norm, s=40, marker="s")


def _plan_maps(ds: xr.Dataset, table: pd.DataFrame, study: dict, top: int = 3) -> str:
    labels = _labels(study)
    done = table[table["status"] != "incomplete"].head(top)
    options = _options(ds)
    metrics = [(n, _plan_title(n, options), _plan_unit(n)) for n in PLAN_METRICS
               if _per_sensor(ds, n, 0) is not None]
    if done.empty or not metrics or "x" not in ds or "y" not in ds:
        return '<p class="note">No per-sensor results to draw.</p>'
    axes = axes_of(ds)
    data = {}
    for n, _, _ in metrics:
        scale = display_unit(n)[0]
        data[n] = [_per_sensor(ds, n, int(v)) * scale for v in done["variant"]]
    fig = Figure(figsize=(4.2 * len(metrics), 4.8 * len(done) + 0.6))
    grid = fig.subplots(len(done), len(metrics), squeeze=False)
    for j, (n, title, unit) in enumerate(metrics):
        top_value = 100.0 if registry.METRICS[n].share else max(
            1.0, float(np.nanmax([np.nanmax(a) for a in data[n]])))
        norm = colors.Normalize(0.0, np.ceil(top_value))
        for i, (_, row) in enumerate(done.iterrows()):
            ax = grid[i, j]
            variant = int(row["variant"])
            x, y = _sensor_xy(ds, variant)
            mappable = _field(ax, x, y, data[n][i], norm)
            tree = resolved_study(study, ds, variant)
            _draw_room(ax, tree.get("room"))
            orient = tree.get("orientation", 180 if "orientation" not in axes else None)
            room = tree.get("room") if isinstance(tree.get("room"), dict) else {}
            try:
                at = (float(room["width"]) + 0.7, float(room["depth"]) - 0.6)
            except (KeyError, TypeError, ValueError):
                at = (float(np.nanmax(x)) + 0.7, float(np.nanmax(y)) - 0.6)
            _north_arrow(ax, float(orient) if orient is not None else None, at)
            ax.set_aspect("equal")
            ax.tick_params(labelsize=7)
            mean = np.nanmean(data[n][i])
            ax.set_title(f"#{row['rank']}: {title}\nmean {mean:.3g} {unit}", fontsize=9)
            if j == 0:
                ax.set_ylabel(f"#{row['rank']} – y into the room [m]", fontsize=8)
            if i == len(done) - 1:
                ax.set_xlabel("x along the front wall [m]", fontsize=8)
        fig.colorbar(mappable, ax=grid[:, j].tolist(), orientation="horizontal",
                     fraction=0.04, pad=0.06, label=unit)
    captions = "".join(
        f"<li>#{row['rank']}: {_esc(_variant_caption(row, axes, labels))}</li>"
        for _, row in done.iterrows())
    return (_png(fig, "plan maps of per-sensor results for the top variants")
            + f'<ul class="note">{captions}</ul>'
            + '<p class="note">Blue bars: windows in the walls; dashed outline: roof '
              "windows; the arrow points to north.</p>")


def _hourly_map(ds: xr.Dataset, table: pd.DataFrame, study: dict) -> str:
    if "illuminance" not in ds or "time" not in ds.coords:
        return ('<p class="note">The hourly illuminance series were not stored for this '
                "study (<code>store_series: false</code>), so the hour-by-hour map is not "
                "shown.</p>")
    done = table[table["status"] != "incomplete"]
    if done.empty:
        return '<p class="note">No finished variants: no hour-by-hour map.</p>'
    best = done.iloc[0]
    variant = int(best["variant"])
    x, y = _sensor_xy(ds, variant)
    room = resolved_study(study, ds, variant).get("room") or {}
    try:
        cx, cy = float(room["width"]) / 2, float(room["depth"]) / 2
    except (KeyError, TypeError, ValueError):
        cx, cy = np.nanmean(x), np.nanmean(y)
    sensor = int(np.nanargmin((x - cx) ** 2 + (y - cy) ** 2))
    series = np.asarray(ds["illuminance"].isel(variant=variant, sensor=sensor).values, float)
    times = pd.DatetimeIndex(ds["time"].values)
    step = study.get("timestep", 60)
    step = float(step) if isinstance(step, int | float) else 60.0
    begins = times - pd.Timedelta(minutes=step)
    slots = round(24 * 60 / step)
    n_days = 366 if (begins.is_leap_year.any()) else 365
    day = np.asarray(begins.day_of_year) - 1
    slot = ((np.asarray(begins.hour) * 60 + np.asarray(begins.minute)) // step).astype(int)
    img = np.full((slots, n_days), np.nan)
    img[slot, day] = series
    top_value = max(1000.0, float(np.nanpercentile(series, 99.5)) if np.isfinite(
        series).any() else 1000.0)
    norm = colors.LogNorm(vmin=10.0, vmax=top_value, clip=True)
    cmap = matplotlib.colormaps[CMAP].with_extremes(bad="#ececec")
    fig = Figure(figsize=(10.5, 3.8))
    ax = fig.add_subplot()
    mesh = ax.imshow(np.where(img <= 0, 10.0, img), aspect="auto", origin="lower",
                     cmap=cmap, norm=norm, extent=(0, n_days, 0, 24), interpolation="nearest")
    month_starts = pd.date_range(f"{begins[0].year}-01-01", periods=12, freq="MS")
    ax.set_xticks(np.asarray(month_starts.day_of_year) - 1,
                  [m.strftime("%b") for m in month_starts], fontsize=8)
    ax.set_yticks(range(0, 25, 3))
    ax.set_xlabel("day of the year")
    ax.set_ylabel("hour of the day (local standard time)")
    fig.colorbar(mesh, ax=ax, label="illuminance [lx] (log scale; ≤ 10 lx shown as 10)")
    return (_png(fig, "hour-by-hour illuminance at one sensor")
            + f'<p class="note">Best variant (#{best["rank"]}: '
              f"{_esc(_variant_caption(best, axes_of(ds), _labels(study)))}), sensor at "
              f"x = {x[sensor]:.2f} m,"
              f" y = {y[sensor]:.2f} m (nearest the room centre). Light grey: hours outside "
              "the occupied period, which the store does not keep.</p>")


GLARE_CLASSES = ("imperceptible", "perceptible", "disturbing", "intolerable")
"""Glare classes of the simplified DGP (kernels.glare.CLASS_EDGES), lowest first."""
GLARE_LEVELS = ("none", "minimum", "medium", "high")
"""Words for the EN 17037 protection-from-glare levels 0–3."""


def _glare_section(ds: xr.Dataset, table: pd.DataFrame, study: dict, top: int = 3) -> str:
    """Per-view glare table of the top variants and the best variant's first view over the
    year (day × hour, coloured by glare class, from the store's ``view_glare_map``)."""
    done = table[table["status"] != "incomplete"]
    if done.empty:
        return '<p class="note">No finished variants: no glare results.</p>'
    views = [str(v) for v in ds["view"].values]
    spaces = ([str(v) for v in ds["view_space"].values] if "view_space" in ds.coords
              else [""] * len(views))
    head = ["rank", "variant", "view", "space",
            *[f"{c} [% of occupied time]" for c in GLARE_CLASSES], "highest DGPs",
            "EN 17037 glare protection"]
    rows = []
    for _, row in done.head(top).iterrows():
        v = int(row["variant"])
        values = {n: np.asarray(ds[n].isel(variant=v).values) for n in (
            *(f"view_glare_{c}" for c in GLARE_CLASSES), "view_dgp_max", "view_glare_level")
            if n in ds}
        for k, name in enumerate(views):
            level = int(values["view_glare_level"][k]) if "view_glare_level" in values else -1
            rows.append([row["rank"], _variant_caption(row, axes_of(ds), _labels(study)), name,
                         spaces[k],
                         *[f"{100 * float(values[f'view_glare_{c}'][k]):.1f}"
                           for c in GLARE_CLASSES],
                         f"{float(values['view_dgp_max'][k]):.2f}",
                         f"{level} ({GLARE_LEVELS[level]})" if 0 <= level <= 3 else "–"])
    html_table = _table(head, rows)
    best = done.iloc[0]
    variant = int(best["variant"])
    if "view_glare_map" not in ds:
        return html_table
    grid = np.asarray(ds["view_glare_map"].isel(variant=variant, view=0).values, float)
    img = np.where(grid < 0, np.nan, grid).T  # (hour, day)
    cmap = colors.ListedColormap(matplotlib.colormaps[CMAP](np.linspace(0.0, 1.0, 4)))
    cmap = cmap.with_extremes(bad="#ececec")
    fig = Figure(figsize=(10.5, 3.8))
    ax = fig.add_subplot()
    mesh = ax.imshow(img, aspect="auto", origin="lower", cmap=cmap,
                     norm=colors.BoundaryNorm([-0.5, 0.5, 1.5, 2.5, 3.5], 4),
                     extent=(0, img.shape[1], 0, 24), interpolation="nearest")
    month_starts = pd.date_range("2023-01-01", periods=12, freq="MS")
    ax.set_xticks(np.asarray(month_starts.day_of_year) - 1,
                  [m.strftime("%b") for m in month_starts], fontsize=8)
    ax.set_yticks(range(0, 25, 3))
    ax.set_xlabel("day of the year")
    ax.set_ylabel("hour of the day (local standard time)")
    bar = fig.colorbar(mesh, ax=ax, ticks=[0, 1, 2, 3], label="glare class (simplified DGP)")
    bar.ax.set_yticklabels([f"{c}" for c in GLARE_CLASSES], fontsize=8)
    note = (f'<p class="note">Best variant (#{best["rank"]}: '
            f"{_esc(_variant_caption(best, axes_of(ds), _labels(study)))}), view "
            f"{_esc(views[0])}: each cell is the glare class of the hour's highest simplified "
            "DGP (DGPs = 6.22·10⁻⁵ E<sub>v</sub> + 0.184, Wienold 2009) over its occupied "
            "steps; classes below 0.35, 0.35–0.40, 0.40–0.45 and from 0.45. Light grey: "
            "hours outside the occupied period. In a step where the IES LM-83 rule closes "
            "the space's operable shading, the eye sees the closed glazing. EN 17037 "
            "protection from glare: the level whose DGP limit (0.45 minimum, 0.40 medium, "
            "0.35 high) is exceeded in at most 5 % of the occupied time. DGPs reads the "
            "vertical illuminance at the eye only: it ignores contrast and where bright "
            "sources are, so it under-reads glare from direct sun in view.</p>")
    return html_table + _png(fig, f"glare class by hour and day at view {views[0]}") + note


NOTES = """
<dl>
<dt>Daylight autonomy</dt><dd>Share of the occupied hours in which a point gets at least
{daylight_autonomy:g} lx (the study's threshold) from daylight alone.</dd>
<dt>Useful daylight bands</dt><dd>Shares of the occupied hours below {e0:g} lx (too dark),
{e0:g}–{e1:g} lx (useful with some electric light), {e1:g}–{e2:g} lx (useful on its own) and
above {e2:g} lx (likely too bright) — after Nabil &amp; Mardaljevic (2005). "Useful" is
{e0:g}–{e2:g} lx.</dd>
<dt>sDA and ASE</dt><dd>IES LM-83-12, 08:00–18:00 every day: sDA is the share of points
with at least {sda_illuminance:g} lx for at least {sda_time_percent:g} % of those hours, with
operable shading closed in hours where more than 2 % of the points get more than
{sun_threshold:g} lx of direct sun; ASE is the share of points with more than
{sun_threshold:g} lx of direct sun for more than {ase_hours_limit:g} hours, shading
open.</dd>
<dt>EN 17037 daylight provision</dt><dd>Levels 1–3 (minimum, medium, high): a target
illuminance (300/500/750 lx) over half of the working plane and a minimum (100/300/500 lx)
over 95 % of it, each for at least half of the daylight hours (the hours with the sun
above the horizon at their middle, about half of the year).
The check here covers the daylight provision part only.</dd>
<dt>Daylight factor</dt><dd>Indoor illuminance as a percentage of the simultaneous
outdoor horizontal illuminance under the CIE standard overcast sky.</dd>
</dl>
"""

CSS = """
body { font-family: "DejaVu Sans", Arial, sans-serif; margin: 0; color: #1d1d1d;
       background: #fafaf7; line-height: 1.45; }
header { background: #27344d; color: #fff; padding: 22px 40px 18px; }
header h1 { margin: 0 0 4px; font-size: 26px; font-weight: 600; }
header p { margin: 0; opacity: 0.85; }
main { max-width: 1180px; margin: 0 auto; padding: 12px 40px 40px; }
section { margin-top: 30px; }
h2 { font-size: 19px; border-bottom: 2px solid #27344d; padding-bottom: 4px; }
.caution { border: 2px solid #8a6d00; background: #fff8dc; padding: 12px 16px;
           margin-top: 22px; }
.caution strong { display: block; margin-bottom: 4px; }
table { border-collapse: collapse; font-size: 13px; }
table.facts th { text-align: left; padding: 3px 18px 3px 0; font-weight: 600;
                 vertical-align: top; }
table.facts td { padding: 3px 0; }
table.rank { width: 100%; }
table.rank th { background: #e4e7ee; text-align: left; padding: 5px 6px;
                border-bottom: 1px solid #9aa3b5; }
table.rank td { padding: 4px 6px; border-bottom: 1px solid #e0e0e0; }
table.rank td:last-child { white-space: nowrap; }
tr.fail td { color: #555; }
tr.incomplete td { color: #888; font-style: italic; }
.pass { font-weight: 600; }
.fail { font-weight: 400; }
.note { font-size: 13px; color: #444; }
img { width: 100%; height: auto; display: block; margin: 8px 0; }
dt { font-weight: 600; margin-top: 8px; }
dd { margin-left: 18px; font-size: 14px; }
footer { font-size: 12px; color: #555; border-top: 1px solid #ccc; margin-top: 40px;
         padding-top: 8px; }
h3 { font-size: 15px; margin: 18px 0 6px; }
table.inputs { margin-bottom: 6px; }
table.inputs th { background: #eef0f4; text-align: left; padding: 4px 8px;
                  border-bottom: 1px solid #9aa3b5; }
table.inputs td { padding: 3px 8px; border-bottom: 1px solid #e6e6e6; }
dl.cover { display: flex; flex-wrap: wrap; gap: 6px 28px; margin: 12px 0 0; }
dl.cover div { min-width: 140px; }
dl.cover dt { font-size: 11px; text-transform: uppercase; letter-spacing: 0.06em;
              opacity: 0.8; margin: 0; font-weight: 400; }
dl.cover dd { margin: 0; font-size: 15px; }
header .subtitle { font-size: 15px; }
@page { margin: 14mm 12mm 16mm; }
@media print {
  body { background: #fff; font-size: 10.5pt; }
  header { -webkit-print-color-adjust: exact; print-color-adjust: exact; padding: 14px 18px; }
  main { max-width: none; padding: 0 2px; }
  section { margin-top: 14px; }
  h2, h3 { break-after: avoid; page-break-after: avoid; }
  img, table, figure, .caution, dl, tr, .note { break-inside: avoid; page-break-inside: avoid; }
  img { max-height: 235mm; width: auto; max-width: 100%; }
  table.rank { font-size: 8.5pt; }
  thead { display: table-header-group; }
  section.maps, section.hourly { break-before: page; page-break-before: always; }
}
"""


# ---------------------------------------------------------------------------
# spaces (CONTRACT.md §1b, §3): a table of spaces × top variants, plan maps per level


SPACE_COLUMNS = 5
"""Top variants shown side by side in the table of spaces."""
SPACE_PLAN_METRIC = "daylight_autonomy"
"""Per-sensor result coloured on the building plans."""


def _store_spaces(ds: xr.Dataset) -> list[str]:
    return [str(n) for n in coord_values(ds, "space")] if "space" in ds.coords else []


def _expanded_spaces(tree: dict) -> list[dict]:
    """The study's ``spaces:`` with copies expanded (``name-1`` … shifted by ``step``)."""
    out = []
    for item in tree.get("spaces") or []:
        if not isinstance(item, dict):
            continue
        copies = item.get("copies") if isinstance(item.get("copies"), dict) else None
        origin = np.asarray(item.get("origin", (0.0, 0.0, 0.0)), dtype=float)
        if copies is None:
            out.append({**item, "origin": origin})
            continue
        step = np.asarray(copies.get("step", (0.0, 0.0, 0.0)), dtype=float)
        for k in range(int(copies.get("count", 1))):
            out.append({**item, "name": f"{item.get('name')}-{k + 1}", "origin": origin + k * step})
    return out


def _set_named(tree: Any, path: str, value: Any) -> None:
    """Set ``spaces.<name>.…`` in every copy of the space named (CONTRACT.md §1b)."""
    keys = path.split(".")
    if len(keys) < 3 or keys[0] != "spaces" or not isinstance(tree.get("spaces"), list):
        return
    for item in tree["spaces"]:
        if isinstance(item, dict) and item.get("name") == keys[1]:
            _set_path(item, ".".join(keys[2:]), value)


def _wall_segments(space: dict) -> list[tuple[str, tuple[float, float], tuple[float, float]]]:
    """The four walls of a space in plan: (wall, start, end) [m, building frame]."""
    x0, y0 = float(space["origin"][0]), float(space["origin"][1])
    w, d = float(space["width"]), float(space["depth"])
    return [("front", (x0, y0), (x0 + w, y0)), ("back", (x0, y0 + d), (x0 + w, y0 + d)),
            ("left", (x0, y0), (x0, y0 + d)), ("right", (x0 + w, y0), (x0 + w, y0 + d))]


def _covered(point: tuple[float, float], z: float, others: list[dict], reach: float) -> bool:
    """Whether a point just outside a wall lies in another space's footprint at height z."""
    px, py = point
    for s in others:
        x0, y0, z0 = (float(v) for v in s["origin"])
        grow = reach + float(s.get("thickness", 0.0) or 0.0)
        if (x0 - grow <= px <= x0 + float(s["width"]) + grow
                and y0 - grow <= py <= y0 + float(s["depth"]) + grow
                and z0 <= z <= z0 + float(s.get("height", 0.0) or 0.0)):
            return True
    return False


def _window_marks(space: dict, others: list[dict]) -> list[tuple[list[float], list[float], str]]:
    """Plan marks of a space's windows: (xs, ys, kind) [m, building frame], kind
    ``window`` (an outside wall), ``internal`` (a wall another space covers: an
    internal opening, found by probing just beyond the wall at sill height) or
    ``roof`` (the outline of a roof window)."""
    x0, y0, z0 = (float(v) for v in space["origin"])
    walls = {k: (a, b) for k, a, b in _wall_segments(space)}
    marks = []
    for win in space.get("windows") or []:
        try:
            wall, width = win.get("wall"), float(win["width"])
            if wall == "roof":
                length, cx, cy = float(win["length"]), float(win["x"]), float(win["y"])
                xs = [x0 + cx - width / 2, x0 + cx + width / 2]
                ys = [y0 + cy - length / 2, y0 + cy + length / 2]
                marks.append(([xs[0], xs[1], xs[1], xs[0], xs[0]],
                              [ys[0], ys[0], ys[1], ys[1], ys[0]], "roof"))
                continue
            off = float(win.get("offset", 0.0) or 0.0)
            sill = float(win.get("sill", 0.0) or 0.0)
        except (AttributeError, KeyError, TypeError, ValueError):
            continue
        if wall not in walls:
            continue
        (ax_, ay), (bx, by) = walls[wall]
        along_x = ay == by
        c = (ax_ + bx) / 2 + off if along_x else (ay + by) / 2 + off
        out = {"front": (0, -1), "back": (0, 1), "left": (-1, 0), "right": (1, 0)}[wall]
        reach = 0.01 + float(space.get("thickness", 0.0) or 0.0)
        px, py = (c, ay) if along_x else (ax_, c)
        inner = _covered((px + out[0] * reach, py + out[1] * reach), z0 + sill + 0.01, others,
                         0.0)
        xs = [c - width / 2, c + width / 2] if along_x else [ax_, ax_]
        ys = [ay, ay] if along_x else [c - width / 2, c + width / 2]
        marks.append((xs, ys, "internal" if inner else "window"))
    return marks


def _draw_spaces(ax: Any, spaces: list[dict]) -> bool:
    """Walls, windows (blue), internal openings (orange, dashed), roof windows (dashed
    outline) and names of spaces."""
    drawn = False
    styles = {"window": {"color": "#1f77b4", "lw": 3},
              "internal": {"color": "#d97706", "lw": 3, "ls": (0, (2, 1))}}
    for s in spaces:
        try:
            x0, y0, _ = (float(v) for v in s["origin"])
            w, d = float(s["width"]), float(s["depth"])
            marks = _window_marks(s, [o for o in spaces if o is not s])
        except (KeyError, TypeError, ValueError):
            continue
        drawn = True
        occupied = s.get("occupied", True) is not False
        ax.add_patch(Rectangle((x0, y0), w, d, fill=not occupied, lw=1.6, ec="black",
                               fc="#dddddd", hatch=None if occupied else "//"))
        ax.text(x0 + w / 2, y0 + d / 2, str(s.get("name", "")), ha="center", va="center",
                fontsize=7, color="black",
                bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.7})
        for xs, ys, kind in marks:
            if kind == "roof":
                ax.plot(xs, ys, color="white", lw=1.5, ls="--")
                continue
            ax.plot(xs, ys, color="white", lw=6, solid_capstyle="butt")
            ax.plot(xs, ys, solid_capstyle="butt", **styles[kind])
    return drawn


def _short(metric: str, options: dict | None) -> str:
    return metric_heading(metric, options).split(" [")[0]


def _unit(metric: str) -> str:
    unit = display_unit(metric)[1]
    return f" {unit}" if unit and metric != "en17037_level" else ""


GEOMETRY_COLUMNS = ("sunlight_hours", "sunlight_level", "view_angle", "view_level")
"""EN 17037 sunlight and view-out results the table of spaces adds when the store has them."""

GEOMETRY_NOTES = {
    "sunlight_level": (
        "EN 17037 exposure to sunlight",
        "Hours of possible sunlight on the study's chosen day (1 February to 21 March) at a "
        "reference point on the inner face of each outside wall window of a space, counting "
        "the sun only above the study's minimum altitude and only when no surface (reveal, "
        "overhang, obstruction, other space) hides it; weather plays no part. A space takes "
        "its best window. Levels: minimum 1.5 h, medium 3 h, high 4 h (EN 17037:2018, "
        "values from memory). A space without an outside wall window has 0 h (roof windows "
        "and internal openings are not reference points). The building takes its lowest "
        "space."),
    "view_level": (
        "EN 17037 view out",
        "From nine positions at seated eye height (1.2 m) spread over each space: the "
        "horizontal sight angle through outside windows, the outside distance of view and "
        "the layers seen (sky, landscape, ground). Levels: sight angle 14°/28°/54°, distance "
        "6/20/50 m, and the landscape layer (minimum), one more layer (medium), all three "
        "(high) (EN 17037:2018, values from memory); a space has what three quarters of "
        "its positions have (our own reading). The building takes its lowest space."),
}
"""Notes on the EN 17037 sunlight and view-out results, shown when the store has them."""


def _geometry_line(ds: xr.Dataset, v: int) -> list[str]:
    """The EN 17037 sunlight and view-out results of variant ``v`` (building: lowest
    space), as one summary line; none when the store lacks them."""
    parts = []
    if "sunlight_level" in ds.data_vars:
        level = metric_text("sunlight_level", ds["sunlight_level"].values[v])
        hours = format_number(float(ds["sunlight_hours"].values[v]))
        parts.append(f"exposure to sunlight {level} ({hours} h)")
    if "view_level" in ds.data_vars:
        parts.append(f"view out {metric_text('view_level', ds['view_level'].values[v])}")
    if not parts:
        return []
    return [f"Its EN 17037 levels (the lowest space): {_esc('; '.join(parts))}."]


def _geometry_notes(ds: xr.Dataset) -> str:
    """Definitions of the EN 17037 sunlight and view-out results the store holds."""
    items = [f"<dt>{_esc(title)}</dt><dd>{_esc(text)}</dd>"
             for name, (title, text) in GEOMETRY_NOTES.items() if name in ds.data_vars]
    return f"<dl>{''.join(items)}</dl>" if items else ""


def _space_table(ds: xr.Dataset, table: pd.DataFrame, spec: RankSpec, labels: dict[str, str],
                 options: dict | None = None) -> str:
    """The building total first, then every space, for the top variants side by side."""
    names = _store_spaces(ds)
    done = table[table["status"] != "incomplete"].head(SPACE_COLUMNS)
    if done.empty:
        return '<p class="note">No variant has finished yet.</p>'
    metrics = [m for m in (spec.metrics or ["sda", "ase", "udi_useful_mean"])
               if f"space_{m}" in ds.data_vars]
    metrics += [m for m in GEOMETRY_COLUMNS if f"space_{m}" in ds.data_vars and m not in metrics]
    metrics += [m for m in LIGHTING_RESULTS if f"space_{m}" in ds.data_vars and m not in metrics]
    axes = axes_of(ds)
    spaced = [r for r in spec.require if r.spaces is not None]
    head = ["Space", "Grid area [m²]"] + [
        f"#{_esc(format_number(row['rank']))} {_esc(_name_of(row, axes, labels))}"
        for _, row in done.iterrows()]
    area = np.asarray(ds["space_area"].values, float) if "space_area" in ds else None

    def cell(values: list[str], verdict: str) -> str:
        return "<br>".join(_esc(v) for v in values) + (f"<br>{verdict}" if verdict else "")

    rows = []
    building = []
    total_criteria = [r for r in spec.require if r.spaces is None]
    for _, row in done.iterrows():
        values = [f"{_short(m, options)} "
                  f"{metric_text(m, row[m] if m in row else ds[m].values[int(row['variant'])])}"
                  f"{_unit(m)}" for m in metrics]
        missed = [r for r in total_criteria if r.label in str(row["failed"]).split("; ")]
        verdict = ("" if not total_criteria else
                   '<span class="fail">✗ misses ' + _esc("; ".join(
                       criterion_text(r) for r in missed)) + "</span>"
                   if missed else '<span class="pass">✓ meets its criteria</span>')
        building.append(cell(values, verdict))
    total = (float(np.nansum(area[int(done.iloc[0]["variant"])])) if area is not None
             else float("nan"))
    rows.append(f"<tr><th>Building (all spaces)</th><td>{_esc(format_number(total))}</td>"
                + "".join(f"<td>{c}</td>" for c in building) + "</tr>")
    for k, name in enumerate(names):
        cells = []
        for _, row in done.iterrows():
            v = int(row["variant"])
            values = []
            for m in metrics:
                value = np.asarray(ds[f"space_{m}"].values)[v, k]
                absent = (np.isnan(value) if np.issubdtype(np.asarray(value).dtype, np.floating)
                          else value < 0)
                values.append(f"{_short(m, options)} "
                              + ("–" if absent else metric_text(m, float(value)) + _unit(m)))
            applies = [r for r in spaced if r.spaces == "all" or name in r.spaces]
            failing = [r for r in applies
                       if name in str(row.get(f"spaces failing: {r.label}", "")).split(", ")]
            verdict = ("" if not applies else
                       '<span class="fail">✗ misses ' + _esc("; ".join(
                           criterion_text(r).split(" in ")[0] for r in failing)) + "</span>"
                       if failing else '<span class="pass">✓ meets its criteria</span>')
            cells.append(cell(values, verdict))
        a = area[int(done.iloc[0]["variant"]), k] if area is not None else float("nan")
        rows.append(f"<tr><th>{_esc(name)}</th><td>{_esc(format_number(a))}</td>"
                    + "".join(f"<td>{c}</td>" for c in cells) + "</tr>")
    note = ("Building totals: sDA and ASE over the sensors of all spaces together (IES "
            "LM-83-12 takes the whole analysis area), means weighted by each space's grid "
            "area, the EN 17037 level of the lowest space. – marks a space the variant "
            "does not have. Grid areas are those of the first column's variant.")
    if spaced:
        note += " Criteria on spaces: " + "; ".join(criterion_text(r) for r in spaced) + "."
    return ('<table class="rank spaces"><thead><tr>'
            + "".join(f"<th>{h}</th>" for h in head) + "</tr></thead><tbody>"
            + "".join(rows) + "</tbody></table>" + f'<p class="note">{_esc(note)}</p>')


LIGHTING_RESULTS = ("lighting_energy", "lighting_saving")
"""Electric lighting results (registry family ``lighting``), shown when the store has them."""


def _lighting(ds: xr.Dataset, table: pd.DataFrame, study: dict, labels: dict[str, str],
              top: int = 10) -> str:
    """Electric lighting energy and saving of the top variants, with how they are counted."""
    done = table[table["status"] != "incomplete"].head(top)
    if done.empty:
        return '<p class="note">No variant has finished yet.</p>'
    axes = axes_of(ds)
    head = ["Rank", "Variant", *(metric_heading(m) for m in LIGHTING_RESULTS)]
    rows = [[format_number(row["rank"]), _name_of(row, axes, labels),
             *(metric_text(m, np.asarray(ds[m].values)[int(row["variant"])])
               for m in LIGHTING_RESULTS)] for _, row in done.iterrows()]
    light = study.get("lighting") if isinstance(study.get("lighting"), dict) else {}
    units = {"power_density": " W/m²", "target": " lx"}
    given = ", ".join(f"{k.replace('_', ' ')} {v}{units.get(k, '')}"
                      for k, v in light.items() if v is not None)
    note = ("Annual electric lighting energy per m² of floor over the occupied time: the "
            "lights top daylight up to the target illuminance at each space's control point "
            "(the sensor of median daylight factor, or the sensor nearest the given point), "
            "read with the operable shading as the sDA rule sets it. The saving is against "
            "the same lights at full power whenever the space is occupied. Building values "
            "weight each space by its grid area."
            + (f" Settings of the study: {given}." if given else "")
            + " Spaces may override them (see the study text under Inputs).")
    return (_table(head, rows, cls="rank") + f'<p class="note">{_esc(note)}</p>')


def _space_plans(ds: xr.Dataset, table: pd.DataFrame, study: dict) -> str:
    """Plans of the best variant, one per level: every space's grid coloured by daylight
    autonomy, walls, windows, internal openings and an arrow to north."""
    done = table[table["status"] != "incomplete"]
    values = _per_sensor(ds, SPACE_PLAN_METRIC, int(done.iloc[0]["variant"])) if len(done) \
        else None
    if values is None or "x" not in ds or "sensor_space" not in ds.coords:
        return '<p class="note">No per-sensor results to draw.</p>'
    best = done.iloc[0]
    variant = int(best["variant"])
    tree = resolved_study(study, ds, variant)
    spaces = _expanded_spaces(tree)
    x, y = _sensor_xy(ds, variant)
    z = ds["z"].isel(variant=variant) if "variant" in ds["z"].dims else ds["z"]
    z = np.asarray(z.values, float)
    own = ds["sensor_space"]
    own = np.array([str(n) for n in
                    (own.isel(variant=variant) if "variant" in own.dims else own).values],
                   dtype=object)
    level_of = {str(s.get("name")): float(s["origin"][2]) for s in spaces}
    # a sensor's level: its space's floor; spaces not in the study text by the sensor height
    floor = np.array([level_of.get(n, np.nan) for n in own])
    floor = np.where(np.isnan(floor), np.round(z - 0.8, 1), floor)
    levels = sorted({float(f) for f in floor[np.isfinite(x)]}
                    | {float(s["origin"][2]) for s in spaces})
    scale = display_unit(SPACE_PLAN_METRIC)[0]
    norm = colors.Normalize(0.0, 100.0)
    orient = tree.get("orientation", 180 if "orientation" not in axes_of(ds) else None)
    fig = Figure(figsize=(9.0, 5.2 * len(levels) + 0.6))
    grid = fig.subplots(len(levels), 1, squeeze=False)
    mappable = None
    for i, level in enumerate(levels):
        ax = grid[i, 0]
        on = np.isfinite(x) & (floor == level)
        if on.any():
            for name in dict.fromkeys(own[on]):
                sel = on & (own == name)
                mappable = _field(ax, x[sel], y[sel], values[sel] * scale, norm)
        here = [s for s in spaces if float(s["origin"][2]) == level]
        _draw_spaces(ax, here)
        xs = [float(s["origin"][0]) + e for s in here for e in (0.0, float(s["width"]))]
        ys = [float(s["origin"][1]) + e for s in here for e in (0.0, float(s["depth"]))]
        xs += list(x[on]) if on.any() else []
        ys += list(y[on]) if on.any() else []
        x0, x1, y0, y1 = min(xs), max(xs), min(ys), max(ys)
        _north_arrow(ax, float(orient) if orient is not None else None, (x1 + 1.0, y1 - 0.8))
        ax.set_xlim(x0 - 0.4, x1 + 1.8)
        ax.set_ylim(y0 - 0.4, y1 + 0.4)
        ax.set_aspect("equal")
        ax.tick_params(labelsize=7)
        ax.set_title(f"Level at z = {level:g} m: {_plan_title(SPACE_PLAN_METRIC, _options(ds))}",
                     fontsize=9)
        ax.set_xlabel("x along the front façade [m]", fontsize=8)
        ax.set_ylabel("y [m]", fontsize=8)
    if mappable is not None:
        fig.colorbar(mappable, ax=grid[:, 0].tolist(), orientation="horizontal",
                     fraction=0.04, pad=0.08, label=_plan_unit(SPACE_PLAN_METRIC))
    labels = _labels(study)
    return (_png(fig, "building plans per level coloured by daylight autonomy")
            + f'<p class="note">The first-ranked variant '
              f"({_esc(_name_of(best, axes_of(ds), labels))}). Blue bars: windows in "
              "outside walls; orange dashed bars: internal openings between spaces; "
              "dashed outlines: roof windows; hatched: spaces without sensors (not "
              "occupied); the arrow points to north.</p>")


def build_report(ds: xr.Dataset, source: str | None = None, paper: str | None = None) -> str:
    """The report of a results store as one HTML string.

    Parameters
    ----------
    ds : xarray.Dataset
        A results store (CONTRACT.md §3).
    source : str, optional
        The store's path (shown, and used for the time of the last write).
    paper : {"a4", "letter"}, optional
        Page size for printing; without it the printer's own size applies (the
        layout fits both).
    """
    # per-variant results and coordinates: one whole-array read each; per-sensor maps
    # and series stay lazy and are read only for the variants drawn
    small = [n for n in ds.variables if set(ds[n].dims) <= {"variant", "space"}
             or ds[n].dims == ("sensor",)]
    ds = ds.assign({n: ds[n].load() for n in small if n in ds.data_vars})
    ds = ds.assign_coords({n: ds[n].load() for n in small if n in ds.coords})
    study = study_from_store(ds)
    spec = rank_spec_from_store(ds)
    table = rank_table(ds, spec)
    labels = _labels(study)
    name = study.get("name") or ds.attrs.get("study_name") or "daylight study"
    project = study.get("project") if isinstance(study.get("project"), dict) else {}
    title = project.get("project") or name
    several = len(_store_spaces(ds)) > 1  # one space: the room report as it was
    sections = [
        ("summary", "Summary", _summary(ds, study, source, table, spec)),
        ("ranking", "Ranking of the variants", _ranking(table, spec, axes_of(ds), labels,
                                                        options=_options(ds))),
        *([("spaces", "Spaces of the top variants",
            _space_table(ds, table, spec, labels, _options(ds)))] if several else []),
        *([("lighting", "Electric lighting with daylight control",
            _lighting(ds, table, study, labels))] if "lighting_energy" in ds else []),
        ("inputs", "Inputs", _inputs(ds, study)),
        ("geometry", "Geometry", _geometry_sketch(ds, table, study, source)),
        ("tradeoff", "Trade-off between two objectives", _pareto_chart(ds, table, spec)),
        ("effects", "What each choice changes", _main_effect_plots(ds, spec, labels)),
        ("orientation", "Orientation and climate",
         _orientation_climate_map(ds, table, spec, labels)),
        (("maps", "Daylight across the building, level by level",
          _space_plans(ds, table, study)) if several else
         ("maps", "Daylight across the room for the top variants",
          _plan_maps(ds, table, study))),
        ("hourly", "Hour by hour at one point", _hourly_map(ds, table, study)),
        *([("glare", "Glare at the view positions", _glare_section(ds, table, study))]
          if "view" in ds.dims else []),
        ("notes", "What the metrics mean",
         NOTES.format(**registry.thresholds(_options(ds))) + _geometry_notes(ds)),
    ]
    body = "".join(f'<section class="{k}"><h2>{_esc(t)}</h2>{c}</section>'
                   for k, t, c in sections)
    page = {"a4": "@page { size: A4; }", "letter": "@page { size: letter; }"}.get(
        (paper or "").lower(), "")
    n_done, n_all = int(completed_mask(ds).sum()), ds.sizes["variant"]
    return f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{_esc(title)} – daylight option study</title>
<style>{CSS}{page}</style>
</head>
<body>
<header><h1>Daylight option study: {_esc(title)}</h1>
<p class="subtitle">Study {_esc(name)} · {n_done:,} of {plural(n_all, 'variant')} computed ·
luxsweep {_esc(ds.attrs.get("luxsweep_version", __version__))}</p>
{_project_block(study)}</header>
<main>
<div class="caution" role="note"><strong>Please read first</strong>{_esc(CAUTION)}</div>
{body}
<footer>{_esc(CAUTION)}<br>Made by luxsweep {_esc(__version__)}
{_esc("from " + str(source)) if source else ""}.</footer>
</main>
</body>
</html>
"""


_CHROMIUM_NAMES = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")


def find_chromium() -> str | None:
    """Path of a headless-capable Chromium (``$LUXSWEEP_CHROMIUM`` first), or None."""
    env = os.environ.get("LUXSWEEP_CHROMIUM")
    if env:
        return env if Path(env).is_file() else shutil.which(env)
    return next((p for p in map(shutil.which, _CHROMIUM_NAMES) if p), None)


def write_pdf(html_file: Path, pdf_file: Path, timeout: float = 180.0) -> None:
    """Print an HTML report to PDF with headless Chromium.

    Raises
    ------
    UserInputError
        When no Chromium is installed (the message says how to get one) or
        printing fails.
    """
    browser = find_chromium()
    if browser is None:
        raise UserInputError(
            "a PDF needs headless Chromium, which is not installed here; install it (for "
            "example `apt-get install chromium`) or set LUXSWEEP_CHROMIUM to its path, or "
            "print the HTML report from a browser")
    with tempfile.TemporaryDirectory(prefix="luxsweep-pdf-") as profile:
        cmd = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
               "--disable-background-networking", "--disable-component-update",
               "--disable-sync", f"--user-data-dir={profile}", "--no-pdf-header-footer",
               f"--print-to-pdf={pdf_file}", Path(html_file).resolve().as_uri()]
        try:
            done = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout)
        except subprocess.TimeoutExpired as exc:
            raise UserInputError(f"Chromium did not finish printing {pdf_file} within "
                                 f"{timeout:.0f} s") from exc
    if done.returncode != 0 or not Path(pdf_file).is_file():
        raise UserInputError(f"Chromium could not print {pdf_file} (exit {done.returncode}): "
                             + (done.stderr.strip().splitlines() or ["no message"])[-1])


def report_command(results: str, html: str | None = None, pdf: bool | str = False,
                   paper: str | None = None) -> int:
    """``luxsweep report RESULTS [--html FILE] [--pdf [FILE]] [--paper a4|letter]``.

    The default file is ``<RESULTS without .zarr>-report.html`` beside the store;
    with ``pdf`` the same name ending ``.pdf`` (or the given file) is printed
    from it through headless Chromium. Returns the exit status (0); a missing or
    unreadable store raises :class:`~sweep.errors.ResultsStoreError` and a
    missing Chromium :class:`~sweep.errors.UserInputError` (exit status 2).
    """
    ds = open_store(results)
    store = Path(results)
    target = Path(html) if html else store.with_name(
        (store.name[:-5] if store.name.endswith(".zarr") else store.name) + "-report.html")
    if pdf and find_chromium() is None:
        write_pdf(target, target.with_suffix(".pdf"))  # raises the clear message first
    text = build_report(ds, source=str(store), paper=paper or ("a4" if pdf else None))
    target.write_text(text, encoding="utf-8")
    print(f"report written to {target}")
    if pdf:
        pdf_file = Path(pdf) if isinstance(pdf, str) else target.with_suffix(".pdf")
        write_pdf(target, pdf_file)
        print(f"PDF written to {pdf_file}")
    return 0
