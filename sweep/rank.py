"""Criteria, scores, Pareto set and main effects over a results store (``luxsweep rank``).

Reads a results store (CONTRACT.md §3) opened with :func:`xarray.open_zarr` and
the ``rank:`` section of the study file text kept in its attributes:

- ``require``: ``{metric, at_least | at_most, spaces}``. Each completed variant
  passes or fails each criterion; the *margin* is ``value − at_least`` or
  ``at_most − value`` (≥ 0 passes, same unit as the metric). Without ``spaces``
  the criterion is on the building total (the per-variant variable); with
  ``spaces: all``, a name or a list of names it is on each of those spaces
  (``space_<metric>``) and the margin is the smallest of theirs. ``all`` means
  every space the variant has; a named space that the variant lacks fails the
  criterion (it cannot be shown to pass). The spaces that fail are listed per
  criterion (``spaces failing: <criterion>``) and together (``failed_spaces``).
- ``prefer``: ``{metric, goal: max | min, weight}``. Each objective is min-max
  normalised over the completed variants (1 = best, 0 = worst; 1 for every
  variant when all values are equal) and the score is the weighted mean of the
  normalised objectives, 0–1. Without ``prefer`` the score is undefined (NaN)
  and variants keep their store order within the pass/fail groups.
- Order: variants that meet every criterion first (by score, best first), then
  those that fail (fewest failed criteria first, then by score). Variants whose
  ``done`` flag is False are listed as ``incomplete`` and never ranked.
- Pareto set: the variants that meet every criterion and are not dominated on
  the preferred objectives by another such variant (a variant dominates another
  when it is at least as good on every objective and better on one).
- Main effects: for a metric and each varied axis, the mean of the metric over
  the completed variants at each axis value minus their grand mean (exact for a
  complete full-factorial sweep; an approximation otherwise).

Metrics available for ranking are the per-variant numeric variables of the store
(``dims == ("variant",)``), e.g. ``sda``, ``ase``, ``udi_useful_mean``,
``daylight_factor_mean``, ``en17037_level``. :mod:`sweep.registry` gives their
labels and units (:mod:`sweep.labels` writes them for people); a store variable
without an entry is shown by its name.
"""

from __future__ import annotations

import json
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr
import yaml

from luxsweep.sweep.errors import ResultsStoreError, StudyFileError
from luxsweep.sweep.registry import SPACE_PREFIX
from luxsweep.sweep.spaces import ALL_SPACES

__all__ = [
    "MAIN_METRICS",
    "Objective",
    "RankSpec",
    "Requirement",
    "axes_of",
    "completed_mask",
    "coord_values",
    "criterion_text",
    "main_effects",
    "metric_names",
    "objective_values",
    "open_store",
    "pareto_front",
    "parse_rank_spec",
    "print_table",
    "rank_command",
    "rank_spec_from_store",
    "rank_table",
    "shown_metrics",
    "space_names",
    "study_from_store",
    "study_text",
    "variant_names",
]

# attribute names under which the store may keep the study file's text
_STUDY_TEXT_ATTRS = ("study_text", "study", "study_yaml", "study_file_text", "study_file")
_NOT_AXES = {"variant", "variant_id", "label", "n_sensors", "x", "y", "z", "sensor", "time",
             "space", "sensor_space"}


# ---------------------------------------------------------------------------
# reading the store


def study_text(ds: xr.Dataset) -> str:
    """The study file's text kept in the store's attributes ('' if absent)."""
    for key in _STUDY_TEXT_ATTRS:
        value = ds.attrs.get(key)
        if isinstance(value, str) and value.strip():
            return value
    return ""


def study_from_store(ds: xr.Dataset) -> dict[str, Any]:
    """The study file of the store, parsed with :func:`yaml.safe_load` ({} if absent)."""
    text = study_text(ds)
    if not text:
        return {}
    try:
        study = yaml.safe_load(text)
    except yaml.YAMLError as exc:
        raise ResultsStoreError(
            f"the study text in the results store is not valid YAML ({exc}); "
            "re-run `luxsweep run` to rewrite the store"
        ) from exc
    return study if isinstance(study, dict) else {}


def axes_of(ds: xr.Dataset) -> list[str]:
    """Names of the varied axes, in the study's order.

    The store's ``axes`` attribute when present (a list, or a JSON list), else
    every coordinate along ``variant`` except ``variant_id``, ``label`` and
    ``n_sensors``.
    """
    listed = ds.attrs.get("axes")
    if isinstance(listed, str):
        try:
            listed = json.loads(listed)
        except ValueError:
            listed = [a.strip() for a in listed.split(",")]
    if isinstance(listed, list | tuple):
        names = [str(a) for a in listed if str(a) in ds.coords]
        if names:
            return names
    return [
        str(name)
        for name, coord in ds.coords.items()
        if coord.dims == ("variant",) and name not in _NOT_AXES
    ]


def metric_names(ds: xr.Dataset) -> list[str]:
    """Per-variant numeric variables of the store (the metrics available for ranking)."""
    return sorted(
        str(name)
        for name, var in ds.data_vars.items()
        if var.dims == ("variant",) and name != "done" and np.issubdtype(var.dtype, np.number)
        and var.dtype != bool
    )


def completed_mask(ds: xr.Dataset) -> np.ndarray:
    """Boolean per variant: True where the variant's ``done`` flag is set."""
    if "done" not in ds:
        return np.ones(ds.sizes["variant"], bool)
    return np.asarray(ds["done"].values, dtype=bool)


def coord_values(ds: xr.Dataset, name: str) -> np.ndarray:
    """Values of a coordinate; strings (numpy StringDType from Zarr v3) as Python str."""
    values = np.asarray(ds[name].values)
    if values.dtype.kind in "USOT":
        return np.array([str(v) for v in values], dtype=object)
    return values


def _variant_ids(ds: xr.Dataset) -> np.ndarray:
    if "variant_id" in ds.coords or "variant_id" in ds:
        return coord_values(ds, "variant_id")
    return np.array([f"v{i}" for i in range(ds.sizes["variant"])], dtype=object)


# ---------------------------------------------------------------------------
# the rank section


@dataclass(frozen=True)
class Requirement:
    """A criterion: ``metric`` must be ``≥ bound`` (``at_least``) or ``≤ bound``.

    ``spaces``: None for the building total, ``"all"`` for every space of the
    variant, or a tuple of space names.
    """

    metric: str
    bound: float
    at_least: bool
    spaces: str | tuple[str, ...] | None = None

    @property
    def scope(self) -> str:
        """Where the criterion applies, in words ('' for the building total)."""
        if self.spaces is None:
            return ""
        if self.spaces == ALL_SPACES:
            return "in every space"
        return "in " + ", ".join(self.spaces)

    @property
    def label(self) -> str:
        text = f"{self.metric} {'≥' if self.at_least else '≤'} {self.bound:g}"
        return f"{text} {self.scope}" if self.scope else text

    def margin(self, values: np.ndarray) -> np.ndarray:
        """Distance to the bound on the passing side (≥ 0 passes) [metric unit]."""
        return values - self.bound if self.at_least else self.bound - values


@dataclass(frozen=True)
class Objective:
    """A preference: ``goal`` is "max" or "min", ``weight`` ≥ 0.

    ``spaces``: None for the building total; a space name for that space's value;
    ``"all"`` or a tuple of names for the worst of those spaces (the lowest value
    for ``max``, the highest for ``min``), so that no space is traded away for the
    others.
    """

    metric: str
    goal: str
    weight: float
    spaces: str | tuple[str, ...] | None = None

    @property
    def column(self) -> str:
        """Its column in the ranking table: the metric, or ``sda (worst space)``,
        ``sda (worst of a, b)``, ``sda (hall)``."""
        if self.spaces is None:
            return self.metric
        if self.spaces == ALL_SPACES:
            return f"{self.metric} (worst space)"
        if len(self.spaces) == 1:
            return f"{self.metric} ({self.spaces[0]})"
        return f"{self.metric} (worst of {', '.join(self.spaces)})"


@dataclass(frozen=True)
class RankSpec:
    """The parsed ``rank:`` section."""

    require: tuple[Requirement, ...] = ()
    prefer: tuple[Objective, ...] = ()

    @property
    def metrics(self) -> list[str]:
        """Metrics named by the section, in order, without repeats."""
        names = [r.metric for r in self.require] + [o.metric for o in self.prefer]
        return list(dict.fromkeys(names))

    @property
    def columns(self) -> list[str]:
        """The ranking table's value columns the section names: each criterion's
        metric and each objective's :attr:`Objective.column`, without repeats."""
        names = [r.metric for r in self.require] + [o.column for o in self.prefer]
        return list(dict.fromkeys(names))


def _spec_error(place: str, message: str) -> StudyFileError:
    return StudyFileError(f"study file (kept in the results store), key '{place}': {message}")


def parse_rank_spec(section: Any, valid: list[str], spaces: list[str] | None = None,
                    spaced: list[str] | None = None) -> RankSpec:
    """Check a ``rank:`` mapping against the store's metrics and spaces.

    Parameters
    ----------
    section : mapping or None
        ``{"require": [...], "prefer": [...]}`` as in CONTRACT.md §1.
    valid : list of str
        Metric names the store holds (:func:`metric_names`).
    spaces : list of str, optional
        The store's spaces (its ``space`` coordinate); None: not checked.
    spaced : list of str, optional
        Metrics the store holds per space (``space_<metric>``); None: all of ``valid``.

    Raises
    ------
    StudyFileError
        Naming the key (``rank.require.0.metric``) and listing the valid names.
    """
    if section is None:
        return RankSpec()
    if not isinstance(section, dict):
        raise _spec_error("rank", "must be a mapping with 'require' and/or 'prefer' lists")
    unknown = set(section) - {"require", "prefer"}
    if unknown:
        raise _spec_error(f"rank.{sorted(unknown)[0]}", "unknown key; use 'require' or 'prefer'")

    def metric(item: Any, place: str) -> str:
        if not isinstance(item, dict) or "metric" not in item:
            raise _spec_error(place, "each entry needs 'metric: NAME'")
        name = item["metric"]
        if name not in valid:
            raise _spec_error(
                f"{place}.metric",
                f"unknown metric {name!r}; the results store has: {', '.join(valid)}",
            )
        return str(name)

    require = []
    for i, item in enumerate(section.get("require") or []):
        place = f"rank.require.{i}"
        name = metric(item, place)
        has_low, has_high = "at_least" in item, "at_most" in item
        if has_low == has_high:
            raise _spec_error(place, "give exactly one of 'at_least' or 'at_most'")
        bound = item["at_least"] if has_low else item["at_most"]
        if not isinstance(bound, int | float) or isinstance(bound, bool):
            raise _spec_error(place, f"the bound must be a number, got {bound!r}")
        require.append(Requirement(name, float(bound), has_low,
                                   _scope(item.get("spaces"), name, place, spaces, spaced)))
    prefer = []
    for i, item in enumerate(section.get("prefer") or []):
        place = f"rank.prefer.{i}"
        name = metric(item, place)
        goal = item.get("goal", "max")
        if goal not in ("max", "min"):
            raise _spec_error(f"{place}.goal", f"goal must be 'max' or 'min', got {goal!r}")
        weight = item.get("weight", 1.0)
        if not isinstance(weight, int | float) or isinstance(weight, bool) or weight < 0:
            raise _spec_error(f"{place}.weight", f"weight must be a number ≥ 0, got {weight!r}")
        prefer.append(Objective(name, goal, float(weight),
                                _scope(item.get("spaces"), name, place, spaces, spaced)))
    return RankSpec(tuple(require), tuple(prefer))


def _scope(value: Any, metric: str, place: str, spaces: list[str] | None,
           spaced: list[str] | None) -> str | tuple[str, ...] | None:
    """The ``spaces`` of a criterion: None, ``"all"`` or a tuple of known names."""
    if value is None:
        return None
    if spaced is not None and metric not in spaced:
        raise _spec_error(f"{place}.spaces", f"the results store holds no per-space "
                          f"'{metric}' ({SPACE_PREFIX}{metric}); drop 'spaces' to check the "
                          "building total")
    if value == ALL_SPACES:
        return ALL_SPACES
    names = [value] if isinstance(value, str) else value
    if (not isinstance(names, list) or not names
            or not all(isinstance(n, str) for n in names)):
        raise _spec_error(f"{place}.spaces", f"give '{ALL_SPACES}', a space name or a list of "
                          f"space names, got {value!r}")
    for name in names:
        if spaces is not None and name not in spaces:
            raise _spec_error(f"{place}.spaces", f"no space '{name}' in the results store; "
                              f"its spaces are: {', '.join(spaces)} (or '{ALL_SPACES}')")
    return tuple(names)


def space_names(ds: xr.Dataset) -> list[str]:
    """The store's occupied spaces (its ``space`` coordinate; [] in stores without one)."""
    return [str(n) for n in coord_values(ds, "space")] if "space" in ds.coords else []


def rank_spec_from_store(ds: xr.Dataset) -> RankSpec:
    """The checked ``rank:`` section of the study kept in the store."""
    valid = metric_names(ds)
    spaced = [m for m in valid if SPACE_PREFIX + m in ds.data_vars]
    return parse_rank_spec(study_from_store(ds).get("rank"), valid, space_names(ds), spaced)


# ---------------------------------------------------------------------------
# ranking


def pareto_front(values: np.ndarray, goals: list[str] | tuple[str, ...]) -> np.ndarray:
    """Non-dominated rows of an objective table.

    Parameters
    ----------
    values : ndarray (n, k)
        Objective values of n candidates; rows with a NaN are never in the front.
    goals : sequence of k {"max", "min"}
        Direction of each objective.

    Returns
    -------
    ndarray of bool (n,)
        True for rows that no other row dominates (at least as good on every
        objective and strictly better on one). Equal rows are all kept.
    """
    v = np.asarray(values, dtype=float)
    v = v[:, None] if v.ndim == 1 else v
    sign = np.array([1.0 if g == "max" else -1.0 for g in goals])
    if v.shape[1] != sign.size:
        raise ValueError(f"{v.shape[1]} objective columns but {sign.size} goals")
    v = v * sign  # all objectives maximised
    valid = ~np.isnan(v).any(axis=1)
    a, b = v[:, None, :], v[None, :, :]  # a[i] dominated by b[j]?
    dominated = (b >= a).all(axis=2) & (b > a).any(axis=2) & valid[None, :]
    return valid & ~dominated.any(axis=1)


def _normalised(values: np.ndarray, goal: str) -> np.ndarray:
    """Objective values scaled to 0–1 (1 best) over their finite range; an infinite value
    (an outside distance of view with nothing in the way) counts as the end of the range
    it lies beyond; NaN stays NaN."""
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return np.where(np.isnan(values), np.nan, 1.0)
    lo, hi = finite.min(), finite.max()
    values = np.clip(values, lo, hi)
    if hi == lo:
        return np.where(np.isnan(values), np.nan, 1.0)
    n = (values - lo) / (hi - lo)
    return n if goal == "max" else 1.0 - n


def rank_table(ds: xr.Dataset, rank_spec: RankSpec | dict | None = None) -> pd.DataFrame:
    """Criteria, score, Pareto flag and rank of every variant.

    Parameters
    ----------
    ds : xarray.Dataset
        A results store (CONTRACT.md §3).
    rank_spec : RankSpec, dict or None
        The ``rank:`` section; None reads it from the study text in ``ds.attrs``.

    Returns
    -------
    pandas.DataFrame
        One row per variant, ranked variants first (best first), then incomplete
        ones. Columns: ``rank`` (1… for completed variants, NA for incomplete),
        ``variant_id``, one column per varied axis, ``status`` (``pass`` /
        ``fail`` / ``incomplete``), ``failed`` (the criteria missed), one column
        per metric named in the rank section (without one: the main metrics,
        :data:`MAIN_METRICS`), ``margin: <criterion>`` per
        criterion, ``score`` (0–1), ``pareto`` (bool), ``variant`` (store index).
    """
    if rank_spec is None:
        spec = rank_spec_from_store(ds)
    elif isinstance(rank_spec, dict):
        valid = metric_names(ds)
        spec = parse_rank_spec(rank_spec, valid, space_names(ds),
                               [m for m in valid if SPACE_PREFIX + m in ds.data_vars])
    else:
        spec = rank_spec
    done = completed_mask(ds)
    n = done.size
    table = pd.DataFrame({"variant": np.arange(n), "variant_id": _variant_ids(ds)})
    for axis in axes_of(ds):
        table[axis] = coord_values(ds, axis)
    shown = shown_metrics(spec, metric_names(ds))
    names = space_names(ds)
    values = {m: np.asarray(ds[m].values, dtype=float) for m in shown if m in ds.data_vars}
    for o in spec.prefer:
        if o.spaces is not None:
            values[o.column] = objective_values(ds, o, names)
    for m in shown:
        table[m] = np.where(done, values[m], np.nan)
    values.update({r.metric: np.asarray(ds[r.metric].values, dtype=float)
                   for r in spec.require if r.metric not in values})

    passes = done.copy()
    n_failed = np.zeros(n, int)
    failed_text = [[] for _ in range(n)]
    failed_spaces: list[dict[str, None]] = [{} for _ in range(n)]
    for req in spec.require:
        if req.spaces is None:
            margin = np.where(done, req.margin(values[req.metric]), np.nan)
        else:
            per_space, failing = _space_margins(ds, req, names)
            margin = np.where(done, per_space, np.nan)
            table[f"spaces failing: {req.label}"] = [
                ", ".join(f) if d else "" for f, d in zip(failing, done, strict=True)]
            for i in np.flatnonzero(done):
                failed_spaces[i].update(dict.fromkeys(failing[i]))
        ok = margin >= 0  # NaN fails
        table[f"margin: {req.label}"] = margin
        passes &= ok
        n_failed += done & ~ok
        for i in np.flatnonzero(done & ~ok):
            failed_text[i].append(req.label)
    table["failed"] = ["; ".join(t) for t in failed_text]
    table["failed_spaces"] = [", ".join(f) for f in failed_spaces]

    score = np.full(n, np.nan)
    weights = np.array([o.weight for o in spec.prefer])
    if spec.prefer and weights.sum() > 0:
        norm = np.stack([_normalised(np.where(done, values[o.column], np.nan), o.goal)
                         for o in spec.prefer], axis=1)
        score = norm @ weights / weights.sum()
    table["score"] = score

    pareto = np.zeros(n, bool)
    if spec.prefer and passes.any():
        objectives = np.stack([values[o.column] for o in spec.prefer], axis=1)
        idx = np.flatnonzero(passes & ~np.isnan(objectives).any(axis=1))
        pareto[idx] = pareto_front(objectives[idx], [o.goal for o in spec.prefer])
    table["pareto"] = pareto
    table["status"] = np.where(~done, "incomplete", np.where(passes, "pass", "fail"))

    group = np.where(~done, 2, np.where(passes, 0, 1))
    order = np.lexsort((np.arange(n), -np.nan_to_num(score, nan=-np.inf), n_failed, group))
    table = table.iloc[order].reset_index(drop=True)
    ranked = (table["status"] != "incomplete").to_numpy()
    table.insert(0, "rank", pd.array(np.where(ranked, np.cumsum(ranked), 0), dtype="Int64"))
    table.loc[~ranked, "rank"] = pd.NA
    first = ["rank", "variant_id", *axes_of(ds), "status", "failed", "failed_spaces", *shown]
    return table[first + [c for c in table.columns if c not in first]]


def _space_margins(ds: xr.Dataset, req: Requirement, names: list[str]
                   ) -> tuple[np.ndarray, list[list[str]]]:
    """Smallest margin over a criterion's spaces, and the failing spaces, per variant.

    A space the variant lacks (NaN, or a negative level) is skipped by ``all`` and
    fails when named.
    """
    values = _space_values(ds, req.metric)
    cols = (list(range(len(names))) if req.spaces == ALL_SPACES
            else [names.index(n) for n in req.spaces])
    m = req.margin(values[:, cols])  # (n, k), NaN where absent
    present = ~np.isnan(values[:, cols])
    failing_mask = (m < 0) | (~present if req.spaces != ALL_SPACES else False)
    counted = np.where(present, m, np.inf)
    worst = np.min(counted, axis=1) if cols else np.full(len(values), np.inf)
    if req.spaces == ALL_SPACES:
        worst = np.where(present.any(axis=1), worst, np.nan)  # no space at all: fails
    else:
        worst = np.where(present.all(axis=1), worst, np.nan)  # a named space is missing
    failing = [[names[cols[j]] for j in np.flatnonzero(row)] for row in failing_mask]
    return worst, failing


def _space_values(ds: xr.Dataset, metric: str) -> np.ndarray:
    """``space_<metric>`` as floats (variant, space), NaN where the variant lacks the space."""
    raw = np.asarray(ds[SPACE_PREFIX + metric].values)
    values = raw.astype(float)
    if raw.dtype.kind in "iu":
        values[raw < 0] = np.nan  # sweep.store.SPACE_ABSENT_LEVEL
    return values


def objective_values(ds: xr.Dataset, objective: Objective, names: list[str] | None = None
                     ) -> np.ndarray:
    """An objective's value per variant (:class:`Objective`), in the metric's unit.

    Scoped to spaces it is the worst of them; NaN when a named space is missing
    from the variant (or, for ``all``, when it has none): such a variant scores
    no better than the worst (its normalised objective is NaN, so is its score).
    """
    if objective.spaces is None:
        return np.asarray(ds[objective.metric].values, dtype=float)
    names = space_names(ds) if names is None else names
    values = _space_values(ds, objective.metric)
    cols = (list(range(len(names))) if objective.spaces == ALL_SPACES
            else [names.index(n) for n in objective.spaces])
    part = values[:, cols]
    present = ~np.isnan(part)
    fill = np.inf if objective.goal == "max" else -np.inf
    worst = (np.min if objective.goal == "max" else np.max)(np.where(present, part, fill),
                                                           axis=1, initial=fill)
    ok = present.any(axis=1) if objective.spaces == ALL_SPACES else present.all(axis=1)
    return np.where(ok, worst, np.nan)


def main_effects(ds: xr.Dataset, metric: str) -> pd.DataFrame:
    """Main effect of every varied axis on a metric.

    Parameters
    ----------
    ds : xarray.Dataset
        A results store; only completed variants are used.
    metric : str
        A per-variant variable, or a per-sensor one (its grid mean is used).

    Returns
    -------
    pandas.DataFrame
        Columns ``axis``, ``value``, ``mean`` (metric mean over the variants at
        this value), ``effect`` (``mean`` − grand mean) and ``n`` (variants).
    """
    if metric not in ds:
        raise StudyFileError(
            f"unknown metric {metric!r}; the results store has: "
            f"{', '.join(metric_names(ds))}"
        )
    var = ds[metric]
    if "sensor" in var.dims:
        var = var.mean("sensor", skipna=True)
    done = completed_mask(ds)
    v = np.asarray(var.values, dtype=float)[done]
    grand = float(np.nanmean(v)) if v.size else np.nan
    rows = []
    for axis in axes_of(ds):
        a = pd.Series(coord_values(ds, axis)[done])
        frame = pd.DataFrame({"value": a, "metric": v})
        for value, grp in frame.groupby("value", sort=True):
            mean = float(np.nanmean(grp["metric"]))
            rows.append({"axis": axis, "value": value, "mean": mean,
                         "effect": mean - grand, "n": len(grp)})
    return pd.DataFrame(rows, columns=["axis", "value", "mean", "effect", "n"])


# ---------------------------------------------------------------------------
# command line


def open_store(results: str | Path) -> xr.Dataset:
    """Open a results store, with a clear error when it is missing or unreadable."""
    path = Path(results)
    if not path.exists():
        raise ResultsStoreError(
            f"results store '{results}' not found; give the folder written by "
            "`luxsweep run` (by default <study folder>/<name>.zarr)"
        )
    if path.is_file():
        raise ResultsStoreError(f"'{results}' is a file; a results store is the folder "
                                "written by `luxsweep run`")
    try:
        try:
            ds = xr.open_zarr(path, consolidated=True)
        except (KeyError, FileNotFoundError, ValueError):
            ds = xr.open_zarr(path, consolidated=False)  # an unfinished run: not consolidated
    except Exception as exc:  # zarr raises several types for a damaged or foreign folder
        raise ResultsStoreError(
            f"'{results}' is not a readable luxsweep results store (no Zarr group with "
            "luxsweep results in it); check the path, or run the study again to rewrite it"
        ) from exc
    if "variant" not in ds.dims:
        raise ResultsStoreError(
            f"'{results}' has no 'variant' dimension; it is not a luxsweep results store"
        )
    return ds


MAIN_METRICS = ("sda", "ase", "udi_useful_mean", "daylight_factor_mean", "en17037_level",
                "sunlight_level", "view_level")
"""What ``luxsweep rank`` shows when the study's rank section names no metric."""


def shown_metrics(spec: RankSpec, names: list[str] | pd.Index) -> list[str]:
    """The metrics of a ranking table: those the criteria and objectives name, else the
    main ones the store holds."""
    return list(spec.columns) or [m for m in MAIN_METRICS if m in names]


def variant_names(table: pd.DataFrame, ds: xr.Dataset) -> list[str]:
    """Each row's variant named by its values (:func:`sweep.labels.variant_name`)."""
    from luxsweep.sweep.labels import variant_name

    axes = axes_of(ds)
    labels = study_from_store(ds).get("labels")
    labels = labels if isinstance(labels, dict) else None
    values = {a: table[a].tolist() for a in axes}
    return [variant_name({a: values[a][i] for a in axes}, axes, labels)
            for i in range(len(table))]


def criterion_text(req: Requirement) -> str:
    """``sDA ≥ 55 %`` (``sDA ≥ 55 % in every space``) — a criterion in the shown units."""
    from luxsweep.sweep.labels import display_unit, format_number, metric_heading

    scale, unit = display_unit(req.metric)
    bound = format_number(req.bound * scale)
    name = metric_heading(req.metric).split(" [")[0]
    text = f"{name} {'≥' if req.at_least else '≤'} {bound}" + (f" {unit}" if unit else "")
    return f"{text} {req.scope}" if req.scope else text


def _missed_text(req: Requirement, row: pd.Series) -> str:
    """A missed criterion in a table cell: its metric, and the spaces that fail it."""
    from luxsweep.sweep.labels import metric_heading

    name = metric_heading(req.metric).split(" [")[0]
    if req.spaces is None:
        return name
    failing = str(row.get(f"spaces failing: {req.label}", "") or "")
    return f"{name} in {failing}" if failing else f"{name} ({req.scope})"


def print_table(table: pd.DataFrame, ds: xr.Dataset, spec: RankSpec, top: int | None,
                file: Any = None, wide: bool = False) -> None:
    """Print the ranking as a terminal table (rich).

    The narrow table (default) fits a 100-column terminal: rank, the variant named
    by its values, the shown metrics (shares in percent), the score when there
    are objectives and the verdict when there are criteria. ``wide`` adds the
    variant id, every axis as its own column and the Pareto flag.
    """
    from rich import box
    from rich.console import Console
    from rich.table import Table

    from luxsweep.sweep.labels import (
        axis_label,
        format_number,
        metric_heading,
        metric_text,
        plural,
        value_text,
    )

    out = file or sys.stdout
    width = None if out.isatty() else (200 if wide else 100)
    console = Console(file=out, width=width, highlight=False)
    ranked = table[table["status"] != "incomplete"]
    incomplete = table[table["status"] == "incomplete"]
    shown = ranked if top is None else ranked.head(top)
    rows = pd.concat([shown, incomplete])
    names = variant_names(rows, ds)
    metrics = shown_metrics(spec, table.columns)
    study = study_from_store(ds)
    labels = study.get("labels") if isinstance(study.get("labels"), dict) else None
    name = study.get("name", "")
    grid = Table(title=f"Ranking of {name}" if name else "Ranking", title_justify="left",
                 header_style="bold", pad_edge=False, box=box.SIMPLE_HEAD)
    grid.add_column("#", justify="right")
    if wide:
        grid.add_column("variant id")
        for axis in axes_of(ds):
            grid.add_column(axis_label(axis, labels), overflow="fold")
    else:
        grid.add_column("variant", overflow="fold", min_width=26)
    for m in metrics:
        grid.add_column(metric_heading(m), justify="right", overflow="fold", max_width=10)
    if spec.prefer:
        grid.add_column("score", justify="right")
        if wide:
            grid.add_column("Pareto")
    if spec.require:
        grid.add_column("criteria", overflow="fold", min_width=8, max_width=24)
    for (_, row), label in zip(rows.iterrows(), names, strict=True):
        status = row["status"]
        style = "dim" if status == "incomplete" else (None if status == "pass" else "yellow")
        cells = [format_number(row["rank"]) if status != "incomplete" else "–"]
        if wide:
            cells.append(str(row["variant_id"])[:10])
            cells += [value_text(a, row[a]) for a in axes_of(ds)]
        else:
            cells.append(label)
        cells += [metric_text(m, row.get(m, np.nan)) for m in metrics]
        if spec.prefer:
            cells.append(format_number(row["score"]))
            if wide:
                cells.append("yes" if row["pareto"] else "")
        if spec.require:
            missed = [r for r in spec.require if r.label in str(row["failed"]).split("; ")]
            cells.append("not finished" if status == "incomplete" else
                         "all met" if status == "pass" else "misses " + ", ".join(
                             _missed_text(r, row) for r in missed))
        elif status == "incomplete":
            cells[1] += " (not finished)"
        grid.add_row(*cells, style=style)
    console.print(grid)
    parts = [f"{len(ranked):,} of {plural(len(table), 'variant')} complete"]
    if spec.require:
        n_pass = int((table["status"] == "pass").sum())
        parts.append(f"{n_pass:,} meet{'s' if n_pass == 1 else ''} every criterion ("
                     + "; ".join(criterion_text(r) for r in spec.require) + ")")
    else:
        parts.append("no criteria given (the study has no 'require' list)")
    if len(incomplete):
        parts.append(f"{len(incomplete):,} not finished (not ranked)")
    if top is not None and len(shown) < len(ranked):
        parts.append(f"showing the best {len(shown):,}")
    console.print("; ".join(parts))
    if not spec.prefer:
        console.print("No objectives to prefer ('prefer' list): variants keep the study's "
                      "order and have no score.")
    console.print("Shares of time and of the grid are in percent.")


def rank_command(results: str, top: int | None = None, csv: str | None = None,
                 wide: bool = False) -> int:
    """``luxsweep rank RESULTS [--top N] [--csv FILE] [--wide]``: print the ranking,
    optionally save it (the CSV holds every column, the variant's name first, values in
    the store's units).

    Returns the exit status (0). Bad input raises :class:`~sweep.errors.ResultsStoreError`
    or :class:`~sweep.errors.StudyFileError` (exit status 2 in the CLI).
    """
    if top is not None and top < 1:
        raise ResultsStoreError(f"--top must be at least 1, got {top}")
    ds = open_store(results)
    spec = rank_spec_from_store(ds)
    table = rank_table(ds, spec)
    print_table(table, ds, spec, top, wide=wide)
    if csv is not None:
        rows = table.drop(columns=["variant"])
        rows.insert(1, "name", variant_names(table, ds))
        rows.to_csv(csv, index=False, float_format="%.6g")
        print(f"ranking written to {csv}")
    return 0
