"""The self-contained HTML report of a results store (``luxsweep report``).

One HTML file with every image embedded as a base64 PNG (matplotlib, no
pyplot state, no scripts, no external links), in this order:

1. a caution (a design aid, not a certificate);
2. the study at a glance: name, variants done / total, axes and their values,
   climates, room, occupancy, when computed and by which luxsweep version;
3. the ranking table with each criterion met or missed (:mod:`sweep.rank`);
4. the trade-off chart of two objectives with the Pareto set;
5. main effects: the mean of each ranked metric at each value of each axis;
6. an orientation × climate map of the first objective for the best variant's
   other choices (glazing, geometry);
7. room plans coloured by per-sensor daylight autonomy, useful daylight and
   daylight factor for the top variants, with the room outline and windows;
8. a day-of-year × hour-of-day map of illuminance at the sensor nearest the
   room centre for the best variant (only when the series were stored);
9. notes on the metrics.

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
from pathlib import Path
from typing import Any

import matplotlib
import numpy as np
import pandas as pd
import xarray as xr
from matplotlib import colors
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle

from luxsweep.sweep import __version__
from luxsweep.sweep.rank import (
    METRICS,
    RankSpec,
    axes_of,
    completed_mask,
    coord_values,
    main_effects,
    metric_names,
    open_store,
    pareto_front,
    rank_spec_from_store,
    rank_table,
    study_from_store,
)

__all__ = ["build_report", "report_command"]

CMAP = "cividis"
CAUTION = (
    "This report is a design aid for comparing options, not a certificate of "
    "compliance. Results come from a simulation model and its inputs (climate "
    "files, geometry, reflectances, glazing data) and carry their uncertainty. "
    "Compliance with any building code or standard rests on the applicable local "
    "codes and standards and on the judgement of a qualified professional. Glare "
    "and overheating are not assessed."
)
PLAN_METRICS = (
    ("daylight_autonomy", "Daylight autonomy (300 lx)", "% of occupied time"),
    ("udi_useful", "Useful daylight (100–3000 lx)", "% of occupied time"),
    ("daylight_factor", "Daylight factor", "%"),
)


# ---------------------------------------------------------------------------
# small helpers


def _esc(value: Any) -> str:
    return html.escape(str(value))


def _png(fig: Figure, alt: str) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100, bbox_inches="tight")
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    return f'<img src="data:image/png;base64,{data}" alt="{_esc(alt)}">'


def _label(metric: str) -> str:
    label, unit = METRICS.get(metric, (metric.replace("_", " "), ""))
    return f"{label} [{unit}]" if unit and unit != "0–3" else label


SHORT = {
    "sda": "sDA [%]",
    "ase": "ASE [%]",
    "udi_useful_mean": "useful daylight, mean [0–1]",
    "daylight_factor_mean": "daylight factor, mean [%]",
    "daylight_autonomy_mean": "daylight autonomy, mean [0–1]",
    "en17037_level": "EN 17037 level [0–3]",
}


def _short(metric: str) -> str:
    return SHORT.get(metric, _label(metric))


def _breakable(name: str) -> str:
    """Escaped text that may wrap after the dots of a dotted path."""
    return "<wbr>.".join(_esc(part) for part in name.split("."))


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


def _variant_caption(row: pd.Series, axes: list[str]) -> str:
    return ", ".join(f"{a} {_fmt(row[a])}" for a in axes)


# ---------------------------------------------------------------------------
# sections


def _summary(ds: xr.Dataset, study: dict, source: str | None) -> str:
    done = completed_mask(ds)
    axes = axes_of(ds)
    rows = [
        ("Study", study.get("name") or ds.attrs.get("study_name", "(unnamed)")),
        ("Variants", f"{int(done.sum())} of {done.size} computed"
         + ("" if done.all() else f" ({done.size - int(done.sum())} not finished)")),
    ]
    for axis in axes:
        values = pd.unique(pd.Series(coord_values(ds, axis)))
        rows.append((f"Varied: {axis}", ", ".join(_fmt(v) for v in values)))
    climates = study.get("climates") or {}
    if climates:
        rows.append(("Climates", "; ".join(f"{k}: {Path(str(v)).name}"
                                            for k, v in climates.items())))
    room = study.get("room")
    if isinstance(room, dict):
        size = " × ".join(_fmt(room.get(k, "?")) for k in ("width", "depth", "height"))
        rows.append(("Room (width × depth × height)", f"{size} m"))
        rows.append(("Windows", str(len(room.get("windows") or []))))
    elif study.get("mesh"):
        rows.append(("Room", f"mesh {Path(str(study['mesh'])).name}"))
    occ = study.get("occupancy")
    if isinstance(occ, dict):
        rows.append(("Occupied", f"{occ.get('start', '?')}–{occ.get('end', '?')}, "
                                 f"{occ.get('days', '?')}"))
    if "sensor" in ds.sizes:
        rows.append(("Sensors per grid", str(ds.sizes["sensor"])))
    rows.append(("Computed", _when(ds, source)))
    rows.append(("Computed with", f"luxsweep {ds.attrs.get('luxsweep_version', '?')}"))
    rows.append(("Report made", f"{dt.datetime.now().strftime('%Y-%m-%d %H:%M')} "
                                f"with luxsweep {__version__}"))
    body = "".join(f"<tr><th>{_esc(k)}</th><td>{_esc(v)}</td></tr>" for k, v in rows)
    return f'<table class="facts">{body}</table>'


def _when(ds: xr.Dataset, source: str | None) -> str:
    for key in ("finished_at", "computed_at", "created_at", "created"):
        if ds.attrs.get(key):
            return str(ds.attrs[key])
    if source and Path(source).exists():
        latest = max((p.stat().st_mtime for p in Path(source).rglob("*") if p.is_file()),
                     default=Path(source).stat().st_mtime)
        return dt.datetime.fromtimestamp(latest).strftime("%Y-%m-%d %H:%M") + " (last write)"
    return "unknown"


def _ranking(table: pd.DataFrame, spec: RankSpec, axes: list[str], top: int = 25) -> str:
    ranked = table[table["status"] != "incomplete"].head(top)
    incomplete = table[table["status"] == "incomplete"]
    metrics = spec.metrics or [m for m in ("sda", "ase", "udi_useful_mean") if m in table]
    head = ["Rank", "Variant", *[_breakable(a) for a in axes],
            *[f'<span title="{_esc(_label(m))}">{_esc(_short(m))}</span>' for m in metrics]]
    if spec.prefer:
        head += ["Score (0–1)", "Pareto set"]
    head += ["Criteria"]
    out = ['<table class="rank"><thead><tr>']
    out += [f"<th>{h}</th>" for h in head]
    out.append("</tr></thead><tbody>")
    for _, row in pd.concat([ranked, incomplete]).iterrows():
        status = row["status"]
        cells = [_fmt(row["rank"]) if status != "incomplete" else "–",
                 f'<code>{_esc(str(row["variant_id"])[:10])}</code>']
        cells += [_esc(_fmt(row[a])) for a in axes]
        cells += [_esc(_fmt(row.get(m, np.nan))) for m in metrics]
        if spec.prefer:
            cells += [_esc(_fmt(row["score"])), "◆ yes" if row["pareto"] else ""]
        if status == "pass":
            verdict = '<span class="pass">✓ all met</span>'
        elif status == "fail":
            verdict = f'<span class="fail">✗ misses {_esc(row["failed"])}</span>'
        else:
            verdict = '<span class="incomplete">not finished – not ranked</span>'
        if not spec.require and status != "incomplete":
            verdict = "no criteria given"
        cells.append(verdict)
        out.append(f'<tr class="{status}">' + "".join(f"<td>{c}</td>" for c in cells) + "</tr>")
    out.append("</tbody></table>")
    n_ranked = int((table["status"] != "incomplete").sum())
    note = []
    if n_ranked > top:
        note.append(f"Showing the best {top} of {n_ranked} ranked variants; "
                    "`luxsweep rank --csv FILE` writes them all.")
    crit = "; ".join(r.label for r in spec.require) or "none"
    pref = "; ".join(f"{o.metric} ({'higher' if o.goal == 'max' else 'lower'} is better, "
                     f"weight {o.weight:g})" for o in spec.prefer) or "none"
    note.append(f"Criteria: {crit}. Objectives: {pref}.")
    return "".join(out) + "".join(f'<p class="note">{_esc(n)}</p>' for n in note)


def _objective_pair(spec: RankSpec, names: list[str]) -> list[tuple[str, str]]:
    pair = [(o.metric, o.goal) for o in spec.prefer]
    for name, goal in (("sda", "max"), ("ase", "min"), ("udi_useful_mean", "max"),
                       ("daylight_factor_mean", "max")):
        if len(pair) >= 2:
            break
        if name in names and name not in [p[0] for p in pair]:
            pair.append((name, goal))
    return pair[:2]


def _pareto_chart(ds: xr.Dataset, table: pd.DataFrame, spec: RankSpec) -> str:
    pair = _objective_pair(spec, metric_names(ds))
    done = table[table["status"] != "incomplete"]
    if len(pair) < 2 or done.empty:
        return '<p class="note">Fewer than two metrics to compare: no trade-off chart.</p>'
    (mx, gx), (my, gy) = pair
    x = np.asarray(ds[mx].values, float)[done["variant"]]
    y = np.asarray(ds[my].values, float)[done["variant"]]
    ok = (done["status"] == "pass").to_numpy()
    front = np.zeros(len(done), bool)
    if ok.any():
        front[ok] = pareto_front(np.column_stack([x[ok], y[ok]]), [gx, gy])
    fig = Figure(figsize=(7.5, 5.0))
    ax = fig.add_subplot()
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
    ax.set_xlabel(f"{_label(mx)} – {'higher' if gx == 'max' else 'lower'} is better")
    ax.set_ylabel(f"{_label(my)} – {'higher' if gy == 'max' else 'lower'} is better")
    ax.grid(alpha=0.3)
    ax.legend(loc="best", fontsize=8, frameon=True)
    return _png(fig, f"trade-off between {mx} and {my}")


def _main_effect_plots(ds: xr.Dataset, spec: RankSpec) -> str:
    axes = axes_of(ds)
    names = metric_names(ds)
    metrics = spec.metrics or [m for m in ("sda", "ase", "udi_useful_mean") if m in names]
    metrics = metrics[:4]
    if not axes or not metrics or not completed_mask(ds).any():
        return '<p class="note">No varied axes or no finished variants: no main effects.</p>'
    fig = Figure(figsize=(min(3.2 * len(axes), 16), 2.6 * len(metrics)))
    grid = fig.subplots(len(metrics), len(axes), squeeze=False, sharey="row")
    for i, metric in enumerate(metrics):
        effects = main_effects(ds, metric)
        grand = float((effects["mean"] - effects["effect"]).iloc[0]) if len(effects) else 0.0
        for j, axis in enumerate(axes):
            ax = grid[i, j]
            e = effects[effects["axis"] == axis]
            pos = np.arange(len(e))
            ax.axhline(grand, color="0.5", lw=1, ls="--")
            ax.plot(pos, e["mean"], "o-", color="#3b4d6b")
            ax.set_xticks(pos, [_fmt(v) for v in e["value"]], fontsize=8)
            ax.tick_params(axis="y", labelsize=8)
            ax.grid(alpha=0.3)
            if i == len(metrics) - 1:
                ax.set_xlabel(axis, fontsize=9)
            if j == 0:
                ax.set_title(_label(metric), fontsize=9, loc="left")
    fig.suptitle("Mean of each metric at each value of each choice (dashed: mean of all "
                 "finished variants)", fontsize=10)
    fig.tight_layout()
    return _png(fig, "main effects")


def _orientation_climate_map(ds: xr.Dataset, table: pd.DataFrame, spec: RankSpec) -> str:
    axes = axes_of(ds)
    names = metric_names(ds)
    metric = next((o.metric for o in spec.prefer),
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
    values = np.asarray(ds[metric].values, float)
    sel = sel.assign(value=values[sel["variant"]])
    rows = sorted(pd.unique(sel["orientation"])) if "orientation" in axes else ["(fixed)"]
    cols = list(pd.unique(sel["climate"])) if "climate" in axes else ["(fixed)"]
    grid = np.full((len(rows), len(cols)), np.nan)
    for _, r in sel.iterrows():
        i = rows.index(r["orientation"]) if "orientation" in axes else 0
        j = cols.index(r["climate"]) if "climate" in axes else 0
        grid[i, j] = r["value"]
    fig = Figure(figsize=(1.6 * len(cols) + 3.0, 0.6 * len(rows) + 1.8))
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
    ax.set_yticks(range(len(rows)), [f"{_fmt(r)}°" if r != "(fixed)" else r for r in rows])
    ax.set_xlabel("climate")
    ax.set_ylabel("orientation of the front façade (azimuth from north)")
    fig.colorbar(im, ax=ax, label=_label(metric))
    fixed = ", ".join(f"{a} = {_fmt(best[a])}" for a in others) or "no other choices varied"
    return (_png(fig, f"{metric} by orientation and climate")
            + f'<p class="note">{_esc(_label(metric))} with the other choices of the best '
              f"variant: {_esc(fixed)}.</p>")


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
    done = table[table["status"] != "incomplete"].head(top)
    metrics = [(n, t, u) for n, t, u in PLAN_METRICS if _per_sensor(ds, n, 0) is not None]
    if done.empty or not metrics or "x" not in ds or "y" not in ds:
        return '<p class="note">No per-sensor results to draw.</p>'
    axes = axes_of(ds)
    data = {}
    for n, _, _ in metrics:
        scale = 1.0 if n == "daylight_factor" else 100.0
        data[n] = [_per_sensor(ds, n, int(v)) * scale for v in done["variant"]]
    fig = Figure(figsize=(4.2 * len(metrics), 4.8 * len(done) + 0.6))
    grid = fig.subplots(len(done), len(metrics), squeeze=False)
    for j, (n, title, unit) in enumerate(metrics):
        top_value = 100.0 if unit.startswith("%") and n != "daylight_factor" else max(
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
        f"<li>#{row['rank']}: {_esc(_variant_caption(row, axes))}</li>"
        for _, row in done.iterrows())
    return (_png(fig, "plan maps of per-sensor results for the top variants")
            + f'<ul class="note">{captions}</ul>'
            + '<p class="note">Blue bars: windows in the walls; dashed outline: roof '
              "windows; the arrow points to north.</p>")


def _hourly_map(ds: xr.Dataset, table: pd.DataFrame, study: dict) -> str:
    if "illuminance" not in ds or "time" not in ds.coords:
        return ('<p class="note">The hourly illuminance series were not stored for this '
                "study (<code>store_series: false</code>), so the hour-by-hour map is not "
                "shown. Set <code>store_series: true</code> and run the study again to "
                "include it.</p>")
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
              f"{_esc(_variant_caption(best, axes_of(ds)))}), sensor at x = {x[sensor]:.2f} m,"
              f" y = {y[sensor]:.2f} m (nearest the room centre). Light grey: hours outside "
              "the occupied period, which the store does not keep.</p>")


NOTES = """
<dl>
<dt>Daylight autonomy</dt><dd>Share of the occupied hours in which a point gets at least
the threshold illuminance (300 lx unless the study sets another) from daylight alone.</dd>
<dt>Useful daylight bands</dt><dd>Shares of the occupied hours below 100 lx (too dark),
100–300 lx (useful with some electric light), 300–3000 lx (useful on its own) and above
3000 lx (likely too bright) — after Nabil &amp; Mardaljevic (2005). "Useful" is
100–3000 lx.</dd>
<dt>sDA and ASE</dt><dd>IES LM-83-12, 08:00–18:00 every day: sDA is the share of points
with at least 300 lx for at least half of those hours, with operable shading closed in
hours where more than 2 % of the points get more than 1000 lx of direct sun; ASE is the
share of points with more than 1000 lx of direct sun for more than 250 hours, shading
open.</dd>
<dt>EN 17037 daylight provision</dt><dd>Levels 1–3 (minimum, medium, high): a target
illuminance (300/500/750 lx) over half of the working plane and a minimum (100/300/500 lx)
over 95 % of it, each for at least half of the daylight hours (sun above the horizon).
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
img { max-width: 100%; height: auto; display: block; margin: 8px 0; }
dt { font-weight: 600; margin-top: 8px; }
dd { margin-left: 18px; font-size: 14px; }
footer { font-size: 12px; color: #555; border-top: 1px solid #ccc; margin-top: 40px;
         padding-top: 8px; }
"""


def build_report(ds: xr.Dataset, source: str | None = None) -> str:
    """The report of a results store as one HTML string.

    Parameters
    ----------
    ds : xarray.Dataset
        A results store (CONTRACT.md §3).
    source : str, optional
        The store's path (shown, and used for the time of the last write).
    """
    # per-variant and per-sensor results are small: read them once (series stay lazy)
    small = [n for n in ds.variables if "time" not in ds[n].dims]
    ds = ds.assign({n: ds[n].load() for n in small if n in ds.data_vars})
    ds = ds.assign_coords({n: ds[n].load() for n in small if n in ds.coords})
    study = study_from_store(ds)
    spec = rank_spec_from_store(ds)
    table = rank_table(ds, spec)
    name = study.get("name") or ds.attrs.get("study_name") or "daylight study"
    sections = [
        ("Study at a glance", _summary(ds, study, source)),
        ("Ranking of the variants", _ranking(table, spec, axes_of(ds))),
        ("Trade-off between two objectives", _pareto_chart(ds, table, spec)),
        ("What each choice changes", _main_effect_plots(ds, spec)),
        ("Orientation and climate", _orientation_climate_map(ds, table, spec)),
        ("Daylight across the room for the top variants", _plan_maps(ds, table, study)),
        ("Hour by hour at one point", _hourly_map(ds, table, study)),
        ("What the metrics mean", NOTES),
    ]
    body = "".join(f"<section><h2>{_esc(t)}</h2>{c}</section>" for t, c in sections)
    return f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{_esc(name)} – daylight option study</title>
<style>{CSS}</style>
</head>
<body>
<header><h1>Daylight option study: {_esc(name)}</h1>
<p>{int(completed_mask(ds).sum())} of {ds.sizes["variant"]} variants computed ·
luxsweep {_esc(ds.attrs.get("luxsweep_version", __version__))}</p></header>
<main>
<div class="caution" role="note"><strong>Please read first</strong>{_esc(CAUTION)}</div>
{body}
<footer>{_esc(CAUTION)}<br>Made by luxsweep {_esc(__version__)}
{_esc("from " + str(source)) if source else ""}.</footer>
</main>
</body>
</html>
"""


def report_command(results: str, html: str | None = None) -> int:
    """``luxsweep report RESULTS [--html FILE]``: write the HTML report.

    The default file is ``<RESULTS without .zarr>-report.html`` beside the store.
    Returns the exit status (0); a missing or unreadable store raises
    :class:`~sweep.errors.ResultsStoreError` (exit status 2 in the CLI).
    """
    ds = open_store(results)
    store = Path(results)
    target = Path(html) if html else store.with_name(
        (store.name[:-5] if store.name.endswith(".zarr") else store.name) + "-report.html")
    text = build_report(ds, source=str(store))
    target.write_text(text, encoding="utf-8")
    print(f"report written to {target}")
    return 0
