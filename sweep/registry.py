"""The metric registry: every result luxsweep stores or ranks, defined once.

Each :class:`Metric` entry gives the result's store name, the metric family
that computes it (the study file's ``metrics:`` list), its dimensions, dtype and
unit, and a label template filled from the study's ``metric_options`` (so a
label says "500 lx" when the study sets a 500 lx daylight-autonomy threshold).
Everything else reads this table: the study file's metric families and rankable
metrics (:mod:`sweep.config`), the variables the engine keeps
(:func:`store_variables`, :mod:`sweep.run`), the store's dtypes and ``units`` /
``long_name`` attributes (:mod:`sweep.store`), and the labels and units of
:mod:`sweep.rank` and :mod:`sweep.report`. The metrics the kernels compute
(:func:`kernels.metrics.finalize`) are checked against it by a test.

Adding a metric: one :class:`Metric` entry here plus its accumulator and
``finalize`` rule in :mod:`kernels.metrics` (see DEVELOPERS.md).

Unit convention
---------------
- In the store, shares of time and of sensors are fractions 0–1 (unit ``"1"``),
  except the shares CONTRACT.md fixes as percentages: ``sda``, ``ase`` and the
  daylight factor (``"%"``). Hours are ``"h"``, illuminance ``"lx"``, light
  exposure ``"lx·h"`` (middle dot, the only spelling), angles ``"deg"``,
  distances ``"m"``, lighting energy per floor area ``"kWh/m²"`` and its saving
  ``"%"``; EN 17037 levels and layer counts ``"1"`` (shown ``0–3``).
- Numbers a user compares with ranking criteria (``rank:`` bounds, the rank
  table and its CSV) are in store units; the table header names the unit
  (``[0–1]``, ``[%]``, ``[h]``). The report's room plans show time shares in
  percent of occupied time (:func:`percent_scale`).

Threshold names
---------------
One name per quantity from the study file to the kernels (:data:`THRESHOLDS`):
``metric_options.sun_threshold`` is :attr:`kernels.metrics.MetricParams.sun_threshold`,
``ase_hours_limit`` is ``MetricParams.ase_hours_limit`` (the stored per-sensor
``ase_hours`` is a count of hours, a different quantity).
``sda_time_percent`` is the study file's percentage; the kernel takes the same
quantity as a fraction, ``MetricParams.sda_time_fraction`` (name says the unit).
The former study-file spellings ``ase_illuminance``, ``ase_hours`` and
``sda_time_fraction`` are still read (:data:`RENAMED_OPTIONS`): a study file
that uses them gets a warning naming the new key, and the variant hash is
computed with the former spellings so stores made before the rename keep their
``variant_id`` values and stay resumable (:func:`sweep.expand.variant_params`).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, Literal

__all__ = [
    "DEFAULT_FAMILIES",
    "DEFAULT_THRESHOLDS",
    "FAMILIES",
    "GEOMETRY_FAMILIES",
    "LEVEL_METRICS",
    "METRICS",
    "RENAMED_OPTIONS",
    "SPACE_PREFIX",
    "THRESHOLDS",
    "Metric",
    "Threshold",
    "base_metric",
    "display_unit",
    "finalize_names",
    "label",
    "long_name",
    "metric_params",
    "percent_scale",
    "rank_metrics",
    "renamed_options",
    "sensor_metrics",
    "space_metrics",
    "space_variables",
    "store_variables",
    "thresholds",
    "variant_metrics",
    "view_metrics",
    "view_variables",
]

DEFAULT_FAMILIES: tuple[str, ...] = ("daylight_factor", "daylight_autonomy", "udi", "sda_ase",
                                     "en17037")
"""The metric families of a study whose ``metrics:`` list is left out (CONTRACT.md §1)."""

GEOMETRY_FAMILIES: tuple[str, ...] = ("sunlight", "view_out")
"""Opt-in families of EN 17037 results that depend on geometry and the sun's path only
(exposure to sunlight, view out): computed per space by :mod:`sweep.run` from
:mod:`kernels.sunlight` and :mod:`kernels.view`, never by default."""

FAMILIES: tuple[str, ...] = (*DEFAULT_FAMILIES, *GEOMETRY_FAMILIES, "lighting", "glare")
"""Metric families a study may list under ``metrics:``, in store order: the default
ones, then the opt-in ones (``lighting``: electric lighting energy, needs the
study's ``lighting:`` settings; ``glare``: glare at the ``views:``)."""


@dataclass(frozen=True)
class Metric:
    """One result of the registry.

    Attributes
    ----------
    name : str
        Store variable name (CONTRACT.md §3 names are kept).
    family : str
        Metric family (one of :data:`FAMILIES`) whose computation yields it.
    per : {"sensor", "variant", "view"}
        Per-sensor ``(variant, sensor)``, per-variant ``(variant,)`` or per-view
        ``(variant, view)`` result (views: the study's ``views:`` positions).
    dtype : str
        Store dtype.
    unit : str
        Store ``units`` attribute: ``"1"`` (fraction 0–1 or level), ``"%"``,
        ``"h"``, ``"lx"``, ``"lx·h"``.
    label : str
        Short human label, a :meth:`str.format` template over :func:`thresholds`.
    description : str
        Store ``long_name`` template, over the same fields.
    source : {"finalize", "engine", "derived"}
        ``finalize``: a key of :func:`kernels.metrics.finalize`; ``engine``:
        computed by :mod:`sweep.run` from other kernels (daylight factor);
        ``derived``: drawn from stored results, not stored itself.
    rank : bool
        Ranking criteria and objectives may name it (per-variant only).
    share : bool
        A share of occupied or analysis time (shown in percent by the report).
    display : str
        Unit shown in human text when it differs from ``unit`` ("" = derive).
    """

    name: str
    family: str
    per: Literal["sensor", "variant", "view"]
    dtype: str
    unit: str
    label: str
    description: str
    source: Literal["finalize", "engine", "derived"] = "finalize"
    rank: bool = False
    share: bool = False
    display: str = ""

    @property
    def dims(self) -> tuple[str, ...]:
        """Store dimensions."""
        return {"sensor": ("variant", "sensor"), "view": ("variant", "view")}.get(
            self.per, ("variant",))

    @property
    def stored(self) -> bool:
        """Whether the results store holds it."""
        return self.source != "derived"


_SDA = "sDA {sda_illuminance:g} lx / {sda_time_percent:g} %"
_ASE = "ASE {sun_threshold:g} lx / {ase_hours_limit:g} h"

_ENTRIES: tuple[Metric, ...] = (
    # daylight factor
    Metric("daylight_factor", "daylight_factor", "sensor", "float32", "%",
           "daylight factor", "daylight factor under the CIE overcast sky", source="engine"),
    Metric("daylight_factor_error", "daylight_factor", "sensor", "float32", "%",
           "daylight factor standard error",
           "standard error of the daylight factor estimated from the ray samples",
           source="engine"),
    Metric("daylight_factor_mean", "daylight_factor", "variant", "float32", "%",
           "daylight factor, grid mean", "grid mean daylight factor", source="engine",
           rank=True),
    # daylight autonomy
    Metric("daylight_autonomy", "daylight_autonomy", "sensor", "float32", "1",
           "daylight autonomy {daylight_autonomy:g} lx",
           "fraction of occupied time at or above {daylight_autonomy:g} lx", share=True),
    Metric("continuous_daylight_autonomy", "daylight_autonomy", "sensor", "float32", "1",
           "continuous daylight autonomy {daylight_autonomy:g} lx",
           "continuous daylight autonomy at {daylight_autonomy:g} lx (partial credit below "
           "the threshold)", share=True),
    Metric("mean_illuminance", "daylight_autonomy", "sensor", "float32", "lx",
           "mean illuminance over occupied time", "mean illuminance over the occupied time"),
    Metric("light_exposure", "daylight_autonomy", "sensor", "float32", "lx·h",
           "annual light exposure", "annual light exposure over all steps"),
    Metric("daylight_autonomy_mean", "daylight_autonomy", "variant", "float32", "1",
           "daylight autonomy {daylight_autonomy:g} lx, grid mean",
           "grid mean of daylight autonomy at {daylight_autonomy:g} lx", rank=True, share=True),
    # useful daylight illuminance
    Metric("udi_low", "udi", "sensor", "float32", "1", "daylight below {e0:g} lx",
           "fraction of occupied time below {e0:g} lx", share=True),
    Metric("udi_supplementary", "udi", "sensor", "float32", "1", "daylight {e0:g}–{e1:g} lx",
           "fraction of occupied time in the supplementary UDI band ({e0:g}–{e1:g} lx)",
           share=True),
    Metric("udi_autonomous", "udi", "sensor", "float32", "1", "daylight {e1:g}–{e2:g} lx",
           "fraction of occupied time in the autonomous UDI band ({e1:g}–{e2:g} lx)",
           share=True),
    Metric("udi_high", "udi", "sensor", "float32", "1", "daylight above {e2:g} lx",
           "fraction of occupied time above {e2:g} lx", share=True),
    Metric("udi_useful", "udi", "sensor", "float32", "1", "useful daylight {e0:g}–{e2:g} lx",
           "fraction of occupied time in the useful band ({e0:g}–{e2:g} lx)",
           source="derived", share=True),
    Metric("udi_useful_mean", "udi", "variant", "float32", "1",
           "useful daylight ({e0:g}–{e2:g} lx), grid mean",
           "grid mean of the fraction of occupied time in the useful band "
           "({e0:g}–{e2:g} lx)", rank=True, share=True),
    # sDA and ASE (IES LM-83-12)
    Metric("direct_sun_hours", "sda_ase", "sensor", "float32", "h",
           "occupied hours of direct sun above {sun_threshold:g} lx",
           "occupied hours above {sun_threshold:g} lx of direct sun (direct sun only)"),
    Metric("ase_hours", "sda_ase", "sensor", "float32", "h",
           "analysis hours of direct sun above {sun_threshold:g} lx",
           "analysis hours (08:00-18:00) above {sun_threshold:g} lx of direct sun "
           "(direct sun only)"),
    Metric("sda_fraction", "sda_ase", "sensor", "float32", "1",
           "share of analysis hours at or above {sda_illuminance:g} lx",
           "fraction of analysis hours at or above {sda_illuminance:g} lx (shading rule "
           "applied)", share=True),
    Metric("sda", "sda_ase", "variant", "float32", "%",
           "spatial daylight autonomy " + _SDA,
           "spatial daylight autonomy " + _SDA + " (IES LM-83-12)", rank=True),
    Metric("ase", "sda_ase", "variant", "float32", "%",
           "annual sunlight exposure " + _ASE,
           "annual sunlight exposure " + _ASE + " (IES LM-83-12)", rank=True),
    Metric("shading_hours", "sda_ase", "variant", "float32", "h",
           "analysis hours with shading closed (LM-83 rule)",
           "analysis hours with the operable shading closed (IES LM-83-12 rule)", rank=True),
    # EN 17037
    Metric("en17037_level", "en17037", "variant", "int8", "1",
           "EN 17037 daylight provision level",
           "EN 17037 daylight provision level: 0 none, 1 minimum, 2 medium, 3 high",
           rank=True, display="0–3"),
    # EN 17037 exposure to sunlight (kernels.sunlight); building = the lowest occupied space
    Metric("sunlight_hours", "sunlight", "variant", "float32", "h",
           "EN 17037 sunlight hours",
           "EN 17037 hours of possible sunlight on the chosen day at the best window "
           "reference point (building: the fewest among the occupied spaces)",
           source="engine", rank=True),
    Metric("sunlight_level", "sunlight", "variant", "int8", "1",
           "EN 17037 sunlight level",
           "EN 17037 exposure to sunlight level: 0 none, 1 minimum, 2 medium, 3 high "
           "(building: the lowest occupied space)", source="engine", rank=True,
           display="0–3"),
    # EN 17037 view out (kernels.view); a space's value is the one met from 3/4 of its
    # view positions, the building's the lowest occupied space's
    Metric("view_angle", "view_out", "variant", "float32", "deg",
           "EN 17037 horizontal sight angle",
           "EN 17037 horizontal sight angle of the view out, met from three quarters of the "
           "view positions (building: the lowest occupied space)", source="engine", rank=True),
    Metric("view_distance", "view_out", "variant", "float32", "m",
           "EN 17037 outside distance of view",
           "EN 17037 outside distance of view (median over the sight angle; inf: nothing in "
           "the way; 0: no view out), met from three quarters of the view positions "
           "(building: the lowest occupied space)", source="engine", rank=True),
    Metric("view_layers", "view_out", "variant", "int8", "1",
           "EN 17037 view layers seen",
           "EN 17037 layers of the view seen (sky, landscape, ground; 0-3), met from three "
           "quarters of the view positions (building: the lowest occupied space)",
           source="engine", rank=True, display="0–3"),
    Metric("view_level", "view_out", "variant", "int8", "1",
           "EN 17037 view-out level",
           "EN 17037 view out level: 0 none, 1 minimum, 2 medium, 3 high, met from three "
           "quarters of the view positions (building: the lowest occupied space)",
           source="engine", rank=True, display="0–3"),
    # electric lighting with daylight-linked control (kernels.lighting)
    Metric("lighting_energy", "lighting", "variant", "float32", "kWh/m²",
           "electric lighting energy", "annual electric lighting energy per floor area with "
           "daylight-linked control, occupied time (building: weighted by grid area)",
           source="engine", rank=True),
    Metric("lighting_saving", "lighting", "variant", "float32", "%",
           "lighting energy saved by the control",
           "annual electric lighting energy saved by the daylight-linked control against "
           "the same lights without control (building: of the total energy)",
           source="engine", rank=True),
    # glare at the views (simplified DGP, Wienold 2009; EN 17037 protection from glare)
    Metric("view_glare_imperceptible", "glare", "view", "float32", "1",
           "imperceptible glare (DGPs below 0.35)",
           "fraction of occupied time with simplified DGP below 0.35 (imperceptible)",
           source="engine", share=True),
    Metric("view_glare_perceptible", "glare", "view", "float32", "1",
           "perceptible glare (DGPs 0.35–0.40)",
           "fraction of occupied time with simplified DGP from 0.35 to below 0.40 "
           "(perceptible)", source="engine", share=True),
    Metric("view_glare_disturbing", "glare", "view", "float32", "1",
           "disturbing glare (DGPs 0.40–0.45)",
           "fraction of occupied time with simplified DGP from 0.40 to below 0.45 "
           "(disturbing)", source="engine", share=True),
    Metric("view_glare_intolerable", "glare", "view", "float32", "1",
           "intolerable glare (DGPs 0.45 and above)",
           "fraction of occupied time with simplified DGP of 0.45 or more (intolerable)",
           source="engine", share=True),
    Metric("view_dgp_max", "glare", "view", "float32", "1", "highest simplified DGP",
           "highest simplified daylight glare probability over the occupied time",
           source="engine"),
    Metric("view_glare_level", "glare", "view", "int8", "1",
           "EN 17037 glare protection level",
           "EN 17037 protection from glare at the view (simplified DGP): 0 none, 1 minimum, "
           "2 medium, 3 high", source="engine", display="0–3"),
    Metric("glare_level", "glare", "variant", "int8", "1",
           "EN 17037 glare protection level, lowest view",
           "EN 17037 protection from glare (simplified DGP), the lowest level among the "
           "views: 0 none, 1 minimum, 2 medium, 3 high", source="engine", rank=True,
           display="0–3"),
    Metric("glare_disturbing_share", "glare", "variant", "float32", "1",
           "disturbing or intolerable glare, worst view",
           "largest fraction, among the views, of occupied time with simplified DGP of "
           "0.40 or more (disturbing or intolerable glare)", source="engine", rank=True,
           share=True),
)

LEVEL_METRICS: tuple[str, ...] = ("en17037_level", "sunlight_level", "view_level")
"""Results that are EN 17037 levels (0 none, 1 minimum, 2 medium, 3 high), shown in words."""

METRICS: dict[str, Metric] = {m.name: m for m in _ENTRIES}
"""Every result by name, families in :data:`FAMILIES` order."""


@dataclass(frozen=True)
class Threshold:
    """A ``metric_options`` key and the :class:`kernels.metrics.MetricParams` field it sets.

    ``divisor`` converts the study file's unit to the kernel's (``sda_time_percent``
    [%] / 100 → ``sda_time_fraction`` [0–1]).
    """

    key: str
    field: str
    unit: str
    divisor: float = 1.0


THRESHOLDS: tuple[Threshold, ...] = (
    Threshold("daylight_autonomy", "da_threshold", "lx"),
    Threshold("udi_edges", "udi_edges", "lx"),
    Threshold("sda_illuminance", "sda_threshold", "lx"),
    Threshold("sda_time_percent", "sda_time_fraction", "%", 100.0),
    Threshold("sun_threshold", "sun_threshold", "lx"),
    Threshold("ase_hours_limit", "ase_hours_limit", "h"),
)
"""Study-file thresholds (``metric_options``) and the kernel parameters they set."""

DEFAULT_THRESHOLDS: dict[str, Any] = {
    # the study file's defaults (sweep.config.MetricOptions reads them); daylight
    # autonomy 300 lx (Reinhart & Walkenhorst 2001), UDI edges (Nabil & Mardaljevic
    # 2005), sDA 300 lx / 50 %, ASE 1000 lx / 250 h (IES LM-83-12)
    "daylight_autonomy": 300.0,
    "udi_edges": (100.0, 300.0, 3000.0),
    "sda_illuminance": 300.0,
    "sda_time_percent": 50.0,
    "sun_threshold": 1000.0,
    "ase_hours_limit": 250.0,
}


def thresholds(options: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """Values that fill the label templates: ``metric_options`` over the defaults.

    Parameters
    ----------
    options : mapping, optional
        A study's ``metric_options`` (a :class:`sweep.config.MetricOptions`
        dump, or the mapping parsed from a store's study text; former spellings
        are read too).

    Returns
    -------
    dict
        The keys of :data:`THRESHOLDS` plus the UDI edges ``e0``, ``e1``, ``e2`` [lx].
    """
    values = dict(DEFAULT_THRESHOLDS)
    values.update({k: v for k, v in renamed_options(options).items() if k in values})
    values["e0"], values["e1"], values["e2"] = (float(v) for v in values["udi_edges"])
    return values


SPACE_PREFIX = "space_"
"""Prefix of the per-space form of a per-variant result (``space_sda``, CONTRACT.md §3)."""


def base_metric(name: str) -> Metric | None:
    """The registry entry of a result or of its per-space form (None if unregistered)."""
    if name in METRICS:
        return METRICS[name]
    if name.startswith(SPACE_PREFIX):
        metric = METRICS.get(name[len(SPACE_PREFIX):])
        if metric is not None and metric.per == "variant" and metric.stored:
            return metric
    return None


def label(name: str, options: Mapping[str, Any] | None = None) -> str:
    """Short human label of a result, thresholds filled (its name if unregistered).

    The per-space form ``space_<name>`` has its result's label.
    """
    metric = base_metric(name)
    if metric is None:
        return name.replace("_", " ")
    return metric.label.format(**thresholds(options))


def long_name(name: str, options: Mapping[str, Any] | None = None) -> str:
    """Store ``long_name`` of a result (or of its per-space form), thresholds filled."""
    if name not in METRICS and base_metric(name) is not None:
        base = name[len(SPACE_PREFIX):]
        text = f"per space: {long_name(base, options)}"
        if METRICS[base].dtype.startswith("int"):
            text += " (-1 where the variant has no such space)"
        return text
    return METRICS[name].description.format(**thresholds(options))


def display_unit(name: str) -> str:
    """Unit as human text shows it beside store values ("" if unregistered).

    ``"1"`` is written ``0–1`` (a fraction), the EN 17037 level ``0–3``.
    """
    metric = base_metric(name)
    if metric is None:
        return ""
    if metric.display:
        return metric.display
    return "0–1" if metric.unit == "1" else metric.unit


def percent_scale(name: str) -> float:
    """Factor that turns a stored value into the percent the report's plans show (or 1)."""
    metric = base_metric(name)
    return 100.0 if metric is not None and metric.share else 1.0


def sensor_metrics() -> list[str]:
    """Stored per-sensor results."""
    return [m.name for m in _ENTRIES if m.per == "sensor" and m.stored]


def variant_metrics() -> list[str]:
    """Stored per-variant results (the store's ``done`` flag is not a metric)."""
    return [m.name for m in _ENTRIES if m.per == "variant" and m.stored]


def space_metrics() -> list[str]:
    """Stored per-variant results that the store also holds per space, as
    ``space_<name>`` with dimensions (variant, space) (CONTRACT.md §3): every one."""
    return variant_metrics()


def view_metrics() -> list[str]:
    """Stored per-view results (dimensions (variant, view))."""
    return [m.name for m in _ENTRIES if m.per == "view" and m.stored]


def view_variables(metrics: list[str]) -> list[str]:
    """Per-view variables kept for the study's metric families, in registry order."""
    return [m.name for m in _ENTRIES if m.per == "view" and m.stored and m.family in metrics]


def space_variables(metrics: list[str]) -> list[str]:
    """Per-space variables kept for the study's metric families (``space_<name>``), in
    the order of :func:`store_variables`' per-variant variables."""
    _, variant = store_variables(metrics)
    return [SPACE_PREFIX + name for name in variant if name in space_metrics()]


def rank_metrics() -> tuple[str, ...]:
    """Per-variant results that ranking criteria and objectives may name."""
    return tuple(m.name for m in _ENTRIES if m.rank)


def finalize_names() -> set[str]:
    """Results :func:`kernels.metrics.finalize` must return (exactly these keys)."""
    return {m.name for m in _ENTRIES if m.source == "finalize"}


def store_variables(metrics: list[str]) -> tuple[list[str], list[str]]:
    """Per-sensor and per-variant variables kept for the study's metric families.

    In the order of ``metrics``, each family's results in registry order.
    """
    sensor: list[str] = []
    variant: list[str] = []
    for family in metrics:
        if family not in FAMILIES:
            raise ValueError(f"unknown metric family '{family}'; valid: {', '.join(FAMILIES)}")
        for m in _ENTRIES:
            if m.family == family and m.stored and m.per != "view":  # views: view_variables
                (sensor if m.per == "sensor" else variant).append(m.name)
    return sensor, variant


def metric_params(options: Mapping[str, Any] | None, step_minutes: float) -> Any:
    """:class:`kernels.metrics.MetricParams` from a study's ``metric_options``.

    Parameters
    ----------
    options : mapping, optional
        ``metric_options`` (study-file names and units, see :data:`THRESHOLDS`).
    step_minutes : float [min]
        The study's ``timestep``.
    """
    from luxsweep.kernels.metrics import MetricParams

    o = renamed_options(options)
    kw: dict[str, Any] = {"step_hours": step_minutes / 60.0}
    for t in THRESHOLDS:
        if t.key in o:
            value = o[t.key]
            kw[t.field] = (tuple(float(v) / t.divisor for v in value)
                           if isinstance(value, list | tuple) else float(value) / t.divisor)
    return MetricParams(**kw)


RENAMED_OPTIONS: dict[str, str] = {
    "ase_illuminance": "sun_threshold",
    "ase_hours": "ase_hours_limit",
    "sda_time_fraction": "sda_time_percent",
}
"""Former ``metric_options`` spellings -> current keys (same value, same unit)."""


def renamed_options(options: Mapping[str, Any] | None) -> dict[str, Any]:
    """``options`` with former spellings replaced by the current keys.

    Raises
    ------
    ValueError
        When a former and a current spelling of one key are both given.
    """
    out = dict(options or {})
    for old, new in RENAMED_OPTIONS.items():
        if old in out:
            if new in out:
                raise ValueError(f"give '{new}' only ('{old}' is its former spelling)")
            out[new] = out.pop(old)
    return out
