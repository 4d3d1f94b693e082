"""Annual daylight metrics from illuminance series, accumulated chunk by chunk.

The engine computes illuminance in time chunks. Each chunk is folded into a
:class:`Counts` of *additive* numpy arrays by :func:`accumulate`; chunks
may be folded in any order or merged with :func:`merge_counts` (they add), and
:func:`finalize` turns the counts into the metrics. A whole year is therefore
never held in memory at once, and the result does not depend on how the year
was cut into chunks (integer counts are identical; float sums agree to rounding).

Shapes
------
``total``, ``direct_sun`` (and ``total_shaded``): float32 ``(..., n_sensors,
n_steps)`` [lx]. The leading ``...`` is any batch shape (orientations, glazing
rows); every count keeps it. Step masks (:class:`StepMasks`) are boolean
``(n_steps,)`` or ``(..., n_steps)`` broadcastable against the batch shape.
The sensors of one call are one grid: grid-level metrics (sDA, ASE, the
LM-83 shading rule, EN 17037) take every sensor of the call as the grid, so pad
slots (NaN sensors) must not be passed in.

Steps skipped by the engine (night steps with zero illuminance everywhere) must
still enter the denominators: fold them with :func:`accumulate_dark`, which is
equivalent to :func:`accumulate` with all-zero illuminance.

Time conventions
----------------
Steps carry hour-ending stamps in local standard time (DEVELOPERS.md): a step
stamped ``t`` of length Δ covers the interval (t − Δ, t]. A step belongs to an
occupied period when its whole interval lies inside it (:func:`occupancy_mask`).
All steps have the same length ``step_hours``; hour-based results (direct sun
hours, ASE hours, light exposure) multiply step counts by it.

Threshold conventions (each stated with its metric below): "at least" is ``≥``,
"more than"/"above"/"exceeds" is ``>``. Fractions of sensors and of time are
compared exactly as integer ratios (no floating-point rounding at a threshold).

Metrics (per sensor unless noted; "grid" = per batch element)
-------------------------------------------------------------
``daylight_autonomy``
    Fraction of occupied time with E ≥ ``da_threshold`` (300 lx). Reinhart &
    Walkenhorst (2001).
``continuous_daylight_autonomy``
    Occupied-time mean of min(E / x, 1): partial credit below the threshold.
    Rogers (2006) (from memory).
``udi_low``, ``udi_supplementary``, ``udi_autonomous``, ``udi_high``
    Fractions of occupied time with E < e0, e0 ≤ E < e1, e1 ≤ E ≤ e2, E > e2
    for band edges (e0, e1, e2) = (100, 300, 3000) lx. Nabil & Mardaljevic
    (2005), with the later split of the useful band at 300 lx (from memory).
    The four bands partition the occupied time, so they sum to 1.
``udi_useful_mean`` (grid)
    Grid mean of ``udi_supplementary + udi_autonomous`` (e0 ≤ E ≤ e2).
``daylight_autonomy_mean`` (grid)
    Grid mean of ``daylight_autonomy``.
``mean_illuminance``
    Occupied-time mean illuminance [lx].
``light_exposure``
    Annual light exposure Σ E Δt over *all* steps of the year [lx·h].
``direct_sun_hours``
    Occupied hours with direct-sun illuminance > ``sun_threshold`` (1000 lx) [h].
``sda_fraction``, ``sda`` (grid, %)
    IES LM-83-12 spatial daylight autonomy sDA_300/50%: share of the grid whose
    illuminance is ≥ 300 lx for ≥ 50 % of the analysis hours (08:00–18:00 local
    standard time, every day; night steps inside the window count as below
    the threshold). In every analysis step where *more than* 2 % of the sensors
    get *more than* 1000 lx of direct sun, the operable shading is closed and
    ``total_shaded`` is used for that step for every sensor (one shading group
    per grid). Without operable shading (``total_shaded=None``) ``total`` is
    used throughout.
``ase_hours``, ``ase`` (grid, %)
    IES LM-83-12 annual sunlight exposure ASE_1000,250h: share of the grid whose
    direct-sun illuminance (shading open) is > 1000 lx for > 250 analysis hours.
``shading_hours`` (grid)
    Analysis hours in which the LM-83 rule closed the shading [h].
``en17037_level`` (grid)
    EN 17037:2018 daylight provision through vertical openings, illuminance
    method: level *k* is met when, for ≥ 50 % of the daylight hours, E ≥ target
    over ≥ 50 % of the grid *and*, for ≥ 50 % of the daylight hours,
    E ≥ minimum target over ≥ 95 % of the grid; (target, minimum) =
    (300, 100) minimum, (500, 300) medium, (750, 500) high [lx]. Result 0 (none),
    1, 2 or 3: the highest level met together with every lower level.
    *Daylight hours* are the steps whose sun (apparent altitude of its centre)
    is above the horizon at the geometric middle of the step
    (``StepMasks.daylight``, supplied by the engine from
    ``kernels.sun.daylight_steps``; about 4380 h a year outside the polar
    circles — half the year, which is how EN 17037 counts them, common
    practice). Each step counts whole or not at all, so the counts are exact
    integers. Shading is open (EN 17037 assesses the openings).

References
----------
- C. F. Reinhart, O. Walkenhorst, "Validation of dynamic RADIANCE-based
  daylight simulations for a test office with external blinds", Energy and
  Buildings 33(7):683–697, 2001. DOI 10.1016/S0378-7788(01)00058-5.
- Z. Rogers, "Daylighting metric development using daylight autonomy
  calculations in the sensor placement optimization tool", Boulder: Architectural
  Energy Corporation, 2006 (from memory).
- A. Nabil, J. Mardaljevic, "Useful daylight illuminance: a new paradigm for
  assessing daylight in buildings", Lighting Research & Technology 37(1):41–59,
  2005. DOI 10.1191/1365782805li128oa.
- IES LM-83-12, "Approved method: IES spatial daylight autonomy (sDA) and
  annual sunlight exposure (ASE)", Illuminating Engineering Society, 2012.
- EN 17037:2018, "Daylight in buildings", CEN, 2018 (Table A.1 levels).
"""

from __future__ import annotations

import functools
import re
from dataclasses import dataclass, field, fields
from fractions import Fraction
from typing import Any

import numpy as np
import pandas as pd

__all__ = [
    "Counts",
    "MetricParams",
    "StepMasks",
    "accumulate",
    "accumulate_dark",
    "area_weighted",
    "daylight_factor_stats",
    "en17037_pass",
    "en17037_time_fractions",
    "finalize",
    "join_counts",
    "lm83_analysis_mask",
    "lm83_closed",
    "merge_counts",
    "occupancy_mask",
    "shading_closed",
    "space_mean",
]

# EN 17037:2018 Table A.1, vertical and inclined openings: (target, minimum target) [lx].
EN17037_LEVELS: tuple[tuple[float, float], ...] = ((300.0, 100.0), (500.0, 300.0), (750.0, 500.0))


@dataclass(frozen=True, kw_only=True)
class MetricParams:
    """Thresholds of the metrics (defaults from the cited definitions).

    The engine fills them from a study's ``metric_options``
    (``sweep.registry.metric_params``, which names the study-file key of each).

    Parameters
    ----------
    step_hours : float [h]
        Length of every time step (``timestep`` minutes / 60).
    da_threshold : float [lx]
        Daylight autonomy threshold x (Reinhart & Walkenhorst 2001; 300 lx).
    udi_edges : tuple of 3 floats [lx]
        UDI band edges (e0, e1, e2) (Nabil & Mardaljevic 2005; 100, 300, 3000).
    sun_threshold : float [lx]
        Direct sun level for ``direct_sun_hours`` and ASE (LM-83-12; 1000 lx).
    sda_threshold : float [lx]
        sDA illuminance (LM-83-12; 300 lx).
    sda_time_fraction : float [-]
        sDA share of analysis hours (LM-83-12; 0.5).
    ase_hours_limit : float [h]
        ASE hours limit (LM-83-12; 250 h, exceeded strictly). The per-sensor
        result ``ase_hours`` is the count it is compared with.
    shading_sensor_fraction : float [-]
        LM-83 rule: shading closes when more than this share of sensors get
        more than ``sun_threshold`` direct sun (LM-83-12; 0.02).
    en17037_levels : tuple of (target, minimum) [lx]
        EN 17037:2018 Table A.1 levels, lowest first.
    en17037_target_area, en17037_minimum_area, en17037_time : float [-]
        Shares of the grid (0.5, 0.95) and of daylight hours (0.5), EN 17037:2018.
    """

    step_hours: float = 1.0
    da_threshold: float = 300.0
    udi_edges: tuple[float, float, float] = (100.0, 300.0, 3000.0)
    sun_threshold: float = 1000.0
    sda_threshold: float = 300.0
    sda_time_fraction: float = 0.5
    ase_hours_limit: float = 250.0
    shading_sensor_fraction: float = 0.02
    en17037_levels: tuple[tuple[float, float], ...] = EN17037_LEVELS
    en17037_target_area: float = 0.5
    en17037_minimum_area: float = 0.95
    en17037_time: float = 0.5

    def __post_init__(self) -> None:
        e0, e1, e2 = self.udi_edges
        if not 0 < e0 < e1 < e2:
            raise ValueError(f"udi_edges must rise strictly above 0, got {self.udi_edges}")
        if self.step_hours <= 0:
            raise ValueError(f"step_hours must be positive, got {self.step_hours}")


@dataclass(frozen=True)
class StepMasks:
    """Which steps of a chunk belong to which period (boolean, ``(..., n_steps)``).

    Parameters
    ----------
    occupied : ndarray of bool
        Occupied steps (:func:`occupancy_mask` with the study's occupancy).
    analysis : ndarray of bool
        IES LM-83-12 analysis steps, 08:00–18:00 every day (:func:`lm83_analysis_mask`).
    daylight : ndarray of bool
        EN 17037 daylight hours: steps with the sun above the horizon at their
        middle (``kernels.sun.daylight_steps``).
    """

    occupied: np.ndarray
    analysis: np.ndarray
    daylight: np.ndarray
    n_steps: int = field(init=False)

    def __post_init__(self) -> None:
        n = {np.shape(m)[-1] for m in (self.occupied, self.analysis, self.daylight)}
        if len(n) != 1:
            raise ValueError(f"step masks disagree on the number of steps: {sorted(n)}")
        object.__setattr__(self, "n_steps", n.pop())


# ---------------------------------------------------------------------------
# time masks


def _minutes_of_day(text: str) -> int:
    match = re.fullmatch(r"(\d{1,2}):(\d{2})", str(text).strip())
    if not match or int(match[2]) >= 60 or int(match[1]) * 60 + int(match[2]) > 1440:
        raise ValueError(f"time of day must be 'HH:MM' between 00:00 and 24:00, got {text!r}")
    return int(match[1]) * 60 + int(match[2])


def occupancy_mask(
    times: pd.DatetimeIndex | np.ndarray,
    start: str,
    end: str,
    days: str = "weekdays",
    step_minutes: float = 60.0,
) -> np.ndarray:
    """Occupied steps of a series of hour-ending time stamps.

    Parameters
    ----------
    times : DatetimeIndex or ndarray of datetime64
        Step stamps in local standard time; each stamp ends its step (a step
        stamped 09:00 of 60 min covers 08:00–09:00). Time-zone-aware stamps are
        read on their own wall clock.
    start, end : str
        Occupied period of every occupied day, ``"HH:MM"``; ``end`` may be
        ``"24:00"``. ``start < end`` (periods over midnight are not supported).
    days : {"weekdays", "all"}
        Monday to Friday, or every day. The day of a step is the day on which
        its interval starts (the step stamped 00:00 belongs to the day before).
    step_minutes : float [min]
        Step length.

    Returns
    -------
    ndarray of bool, shape (n_steps,)
        True where the step's whole interval (t − Δ, t] lies within
        [start, end] of an occupied day.

    Notes
    -----
    With hourly steps and 08:00–18:00 the occupied steps are those stamped
    09:00 … 18:00: ten per day.
    """
    t0 = _minutes_of_day(start)
    t1 = _minutes_of_day(end)
    if t0 >= t1:
        raise ValueError(f"occupancy start {start!r} must be before end {end!r}")
    if days not in ("weekdays", "all"):
        raise ValueError(f"occupancy days must be 'weekdays' or 'all', got {days!r}")
    stamps = pd.DatetimeIndex(times)
    if stamps.tz is not None:
        stamps = stamps.tz_localize(None)  # keep the wall clock of the fixed offset
    begins = stamps - pd.Timedelta(minutes=step_minutes)
    minute = (begins - begins.normalize()) / pd.Timedelta(minutes=1)
    minute = np.asarray(minute, dtype=float)
    inside = (minute >= t0) & (minute + step_minutes <= t1)
    if days == "weekdays":
        inside &= np.asarray(begins.day_of_week) < 5
    return inside


def lm83_analysis_mask(
    times: pd.DatetimeIndex | np.ndarray, step_minutes: float = 60.0
) -> np.ndarray:
    """IES LM-83-12 analysis steps: 08:00–18:00 local standard time, every day.

    See :func:`occupancy_mask` for the stamp convention (3650 hourly steps a year).
    """
    return occupancy_mask(times, "08:00", "18:00", "all", step_minutes)


# ---------------------------------------------------------------------------
# accumulation


@functools.lru_cache(maxsize=64)
def _ratio(fraction: float) -> tuple[int, int]:
    """An exact integer ratio (numerator, denominator) for a decimal share (kept: the
    accumulation asks for the same few shares once per grid piece)."""
    r = Fraction(str(fraction)).limit_denominator(10**6)
    return r.numerator, r.denominator


def _share_at_least(count: np.ndarray, total: np.ndarray | int, fraction: float) -> np.ndarray:
    """``count / total ≥ fraction`` in exact integer arithmetic."""
    num, den = _ratio(fraction)
    return np.asarray(count, dtype=np.int64) * den >= np.asarray(total, dtype=np.int64) * num


def _share_more_than(count: np.ndarray, total: np.ndarray | int, fraction: float) -> np.ndarray:
    """``count / total > fraction`` in exact integer arithmetic."""
    num, den = _ratio(fraction)
    return np.asarray(count, dtype=np.int64) * den > np.asarray(total, dtype=np.int64) * num


@dataclass(frozen=True, eq=False)
class Counts:
    """Additive counts of a stretch of the year (:func:`accumulate`); ``+`` merges two.

    Step counts have the batch shape ``(...)``; per-sensor counts
    ``(..., n_sensors)``; EN 17037 counts ``(..., n_levels)``. Integer counts are
    int64, lux sums float64. "occ" counts are over occupied steps, "ana" over
    the LM-83 analysis steps (08:00–18:00), "day" over daylight steps.

    Attributes
    ----------
    n_steps, n_occupied, n_analysis, n_daylight : ndarray int64
        Steps in all, occupied, in the analysis period, with the sun up.
    occ_da : ndarray int64
        Occupied steps with E ≥ the DA threshold (Reinhart & Walkenhorst 2001).
    occ_udi_reach_supplementary, occ_udi_reach_autonomous : ndarray int64
        Occupied steps with E ≥ the lower UDI edge (100 lx) and ≥ the middle
        edge (300 lx) (Nabil & Mardaljevic 2005).
    occ_udi_high : ndarray int64
        Occupied steps with E > the upper UDI edge (3000 lx).
    occ_sun : ndarray int64
        Occupied steps with direct sun above the sun threshold.
    occ_cda_lux, occ_sum_lux, all_sum_lux : ndarray float64 [lx]
        Σ min(E, DA threshold) and Σ E over occupied steps; Σ E over all steps.
    ana_sda, ana_ase : ndarray int64
        Analysis steps with E ≥ the sDA threshold (shading applied) and with
        direct sun above the sun threshold (IES LM-83-12).
    ana_shaded : ndarray int64
        Analysis steps with the operable shading closed (LM-83 rule).
    day_target_ok, day_minimum_ok : ndarray int64
        Daylight steps meeting each EN 17037 level's target and minimum target
        over the required share of the grid.
    """

    n_steps: np.ndarray
    n_occupied: np.ndarray
    n_analysis: np.ndarray
    n_daylight: np.ndarray
    occ_da: np.ndarray
    occ_udi_reach_supplementary: np.ndarray
    occ_udi_reach_autonomous: np.ndarray
    occ_udi_high: np.ndarray
    occ_sun: np.ndarray
    occ_cda_lux: np.ndarray
    occ_sum_lux: np.ndarray
    all_sum_lux: np.ndarray
    ana_sda: np.ndarray
    ana_ase: np.ndarray
    ana_shaded: np.ndarray
    day_target_ok: np.ndarray
    day_minimum_ok: np.ndarray

    def __add__(self, other: Counts) -> Counts:
        return Counts(**{f.name: getattr(self, f.name) + getattr(other, f.name)
                         for f in fields(self)})


def _plus(counts: Counts | None, chunk: Counts) -> Counts:
    return chunk if counts is None else counts + chunk


def _step_counts(masks: StepMasks) -> dict[str, np.ndarray]:
    """The four step counts of a chunk (``Counts`` fields ``n_*``)."""
    return {
        "n_steps": np.asarray(masks.n_steps, dtype=np.int64),
        "n_occupied": np.count_nonzero(masks.occupied, axis=-1).astype(np.int64),
        "n_analysis": np.count_nonzero(masks.analysis, axis=-1).astype(np.int64),
        "n_daylight": np.count_nonzero(masks.daylight, axis=-1).astype(np.int64),
    }


def _grid_rows(mask: np.ndarray, batch: tuple[int, ...], n_steps: int) -> np.ndarray:
    """A step mask as one row per grid, ``(n_grids, n_steps)`` bool (broadcast, not copied)."""
    m = np.broadcast_to(np.asarray(mask, dtype=bool), (*batch, n_steps))
    return m.reshape(-1, n_steps)


FOLD_STEPS = 512
"""Time steps folded together in :func:`accumulate`: a grid of 200 sensors × 512
float32 steps (400 kB) and its work buffers stay in a core's L2 cache."""


@dataclass(frozen=True)
class _Comparison:
    """A threshold comparison on ``total``: E ≥ ``level`` (E > ``level`` when ``strict``)."""

    level: float
    strict: bool = False


class _Fold:
    """Counts of every variant of one grid piece ``(n_sensors, w)`` at a time.

    Holds the comparisons, each variant's passing levels (:func:`_first_passing`),
    the output arrays (one row per grid × variant) and two work buffers laid
    out like the input. :meth:`piece` runs the stages in order.
    """

    def __init__(self, params: MetricParams, tau: np.ndarray, tau_shut: np.ndarray | None,
                 n_out: int, n_sensors: int, like: np.ndarray, dtype: np.dtype,
                 space: np.ndarray) -> None:
        e0, e1, e2 = params.udi_edges
        self.params, self.n_sensors = params, n_sensors
        # grid-level counts (shading rule, EN 17037) are per space: sums over each space's
        # sensors of the 0/1 indicators; one space is the whole grid
        self.space = space
        self.n_sp = int(space.max()) + 1 if space.size else 1
        self.space_size = np.bincount(space, minlength=self.n_sp).astype(np.int64)[:, None]
        # spaces in sensor order: each a run of sensors [start, stop)
        self.space_runs = None
        if self.n_sp > 1 and np.all(np.diff(space) >= 0):
            cuts = np.flatnonzero(np.diff(space)) + 1
            self.space_runs = list(zip([0, *cuts.tolist()], [*cuts.tolist(), n_sensors],
                                       strict=True))
        self.members = (np.arange(self.n_sp)[:, None] == space[None, :]).astype(dtype)
        self.da = _Comparison(float(params.da_threshold))
        self.udi_low, self.udi_mid = _Comparison(float(e0)), _Comparison(float(e1))
        self.udi_high = _Comparison(float(e2), True)
        self.sda = _Comparison(float(params.sda_threshold))
        self.sun = _Comparison(float(params.sun_threshold), True)
        self.levels = [(_Comparison(float(t)), _Comparison(float(m)))
                       for t, m in params.en17037_levels]
        # counted per sensor over occupied steps (into these outputs); per step over sensors
        # (equal thresholds share one comparison, e.g. DA at 300 lx and the UDI edge)
        self.per_sensor: dict[_Comparison, list[str]] = {}
        for k, name in ((self.da, "occ_da"), (self.udi_low, "occ_udi_reach_supplementary"),
                        (self.udi_mid, "occ_udi_reach_autonomous"),
                        (self.udi_high, "occ_udi_high")):
            self.per_sensor.setdefault(k, []).append(name)
        self.per_step = {k for pair in self.levels for k in pair}
        self.compared = sorted({*self.per_sensor, *self.per_step, self.sda},
                               key=lambda k: (k.level, k.strict))
        # per variant, the unit-illuminance level at which each comparison turns true
        self.limit = {k: np.array([_first_passing(k.level, t, k.strict, dtype) for t in tau],
                                  dtype=dtype)[:, None, None]
                      for k in [*self.compared, self.sun]}
        self.limit_shut = (None if tau_shut is None else
                           np.array([_first_passing(self.sda.level, t, False, dtype)
                                     for t in tau_shut]))
        self.tau64 = tau.astype(np.float64)[:, None]
        self.n_v = tau.size
        self.sensor = {name: np.zeros((n_out, n_sensors), np.int64) for name in (
            "occ_da", "occ_udi_reach_supplementary", "occ_udi_reach_autonomous",
            "occ_udi_high", "occ_sun", "ana_sda", "ana_ase")}
        self.lux = {name: np.zeros((n_out, n_sensors), np.float64)
                    for name in ("occ_cda_lux", "occ_sum_lux", "all_sum_lux")}
        self.shaded = np.zeros((n_out, self.n_sp), np.int64)
        self.target = np.zeros((n_out, self.n_sp, len(self.levels)), np.int64)
        self.minimum = np.zeros((n_out, self.n_sp, len(self.levels)), np.int64)
        width = like.shape[1]
        order = [0, *(1 + np.argsort(like.strides)[::-1])]  # buffers follow the input layout
        shape = (self.n_v, n_sensors, width)
        self.ind, self.work = (
            np.empty([shape[i] for i in order], dtype=dtype).transpose(np.argsort(order))
            for _ in range(2))
        self.every_sensor = np.ones(n_sensors, dtype=dtype)

    def per_space(self, ix: np.ndarray) -> np.ndarray:
        """Sensors of each space whose indicator is 1, per step: ``(n_v, n_spaces, w)`` int64.

        One space: a sum over all sensors; several: a product with the 0/1
        membership matrix (one GEMM). Both exact (sums of 0/1 in the indicators'
        precision, below 2**24 sensors).
        """
        if self.n_sp == 1:
            return (self.every_sensor @ ix).astype(np.int64)[:, None, :]
        return (self.members @ ix).astype(np.int64)

    def sums(self, rows: slice, e: np.ndarray, m_occ: np.ndarray, m_all: np.ndarray) -> None:
        """Lux sums of the piece: Σ E over occupied and all steps (and cDA's first term)."""
        sum_occ, sum_all = (e @ m_occ).astype(np.float64), (e @ m_all).astype(np.float64)
        self.lux["occ_sum_lux"][rows] += self.tau64 * sum_occ
        self.lux["all_sum_lux"][rows] += self.tau64 * sum_all
        self.lux["occ_cda_lux"][rows] += self.tau64 * sum_occ

    def piece(self, rows: slice, e: np.ndarray, d: np.ndarray | None,
              shut_e: np.ndarray | None, m_occ: np.ndarray, m_ana: np.ndarray,
              ana_g: np.ndarray, day_g: np.ndarray) -> None:
        """Count every variant of one piece into output ``rows`` (``d`` None: no sun)."""
        w = e.shape[1]
        ix, wk = self.ind[:, :, :w], self.work[:, :, :w]  # (n_v, S, w)
        step_counts = self._thresholds(rows, e, shut_e, m_occ, m_ana, ix, wk)
        closed = None if d is None else self._direct_sun(rows, d, m_occ, m_ana, ana_g, ix)
        if shut_e is not None or self.limit_shut is not None:
            self._sda_with_shading(rows, e, shut_e, closed, m_ana, ix)
        self._en17037(rows, step_counts, day_g)

    def _thresholds(self, rows: slice, e: np.ndarray, shut_e: np.ndarray | None,
                    m_occ: np.ndarray, m_ana: np.ndarray, ix: np.ndarray, wk: np.ndarray
                    ) -> dict[_Comparison, np.ndarray]:
        """Each distinct comparison once: per-sensor counts, cDA, sDA without shading.

        Returns the per-step sensor counts ``(n_v, w)`` of the EN 17037 comparisons.
        """
        step_counts = {}
        for k in self.compared:
            np.greater_equal(e, self.limit[k], out=ix, casting="unsafe")  # 0/1 indicators
            if k in self.per_step:
                step_counts[k] = self.per_space(ix)  # (n_v, n_spaces, w)
            if k in self.per_sensor or k == self.sda:
                n_occ = ix @ m_occ  # (n_v, S)
                for name in self.per_sensor.get(k, ()):
                    self.sensor[name][rows] += n_occ.astype(np.int64)
                if k == self.sda and shut_e is None and self.limit_shut is None:
                    self.sensor["ana_sda"][rows] += (ix @ m_ana).astype(np.int64)
                if k == self.da:  # Σ min(τE, x) = Σ τE − Σ_{τE ≥ x} τE + x·#(τE ≥ x)
                    np.multiply(e, ix, out=wk)
                    self.lux["occ_cda_lux"][rows] += (self.da.level * n_occ
                                                      - self.tau64 * (wk @ m_occ))
        return step_counts

    def _direct_sun(self, rows: slice, d: np.ndarray, m_occ: np.ndarray, m_ana: np.ndarray,
                    ana_g: np.ndarray, ix: np.ndarray) -> np.ndarray:
        """Direct-sun counts and ASE; returns the steps the LM-83 rule closes in each
        space ``(n_v, n_spaces, w)`` (one shading group per space)."""
        np.greater_equal(d, self.limit[self.sun], out=ix, casting="unsafe")
        n_sunlit = self.per_space(ix)  # (n_v, n_spaces, w)
        self.sensor["occ_sun"][rows] += (ix @ m_occ).astype(np.int64)
        self.sensor["ana_ase"][rows] += (ix @ m_ana).astype(np.int64)
        return (_share_more_than(n_sunlit, self.space_size,
                                 self.params.shading_sensor_fraction) & ana_g)

    def _sda_with_shading(self, rows: slice, e: np.ndarray, shut_e: np.ndarray | None,
                          closed: np.ndarray | None, m_ana: np.ndarray, ix: np.ndarray) -> None:
        """sDA counts where closed steps take the shaded illuminance (IES LM-83-12)."""
        limit = self.limit[self.sda]
        edge = np.broadcast_to(limit[:, :, 0, None], (self.n_v, self.n_sp, e.shape[1]))
        if closed is not None and self.limit_shut is not None:  # per space and step
            edge = np.where(closed, self.limit_shut[:, None, None], edge)
        # per sensor: its space's edge (one space: broadcast over the sensors; spaces in
        # sensor order: run by run; otherwise gathered per sensor)
        if self.n_sp == 1:
            np.greater_equal(e, edge, out=ix, casting="unsafe")
        elif self.space_runs is not None:
            for k, (a, b) in enumerate(self.space_runs):
                np.greater_equal(e[a:b], edge[:, k, None, :], out=ix[:, a:b], casting="unsafe")
        else:
            np.greater_equal(e, edge[:, self.space, :], out=ix, casting="unsafe")
        if closed is not None and shut_e is not None:  # closed steps from the shaded grid
            for v, shut in enumerate(closed):
                if self.n_sp == 1:
                    ix[v][:, shut[0]] = shut_e[:, shut[0]] >= limit[v]
                else:
                    shut_s = shut[self.space]  # (S, w): the sensor's space is closed
                    ix[v][shut_s] = (shut_e >= limit[v])[shut_s]
        if closed is not None:
            self.shaded[rows] += np.count_nonzero(closed, axis=-1)
        self.sensor["ana_sda"][rows] += (ix @ m_ana).astype(np.int64)

    def _en17037(self, rows: slice, step_counts: dict[_Comparison, np.ndarray],
                 day_g: np.ndarray) -> None:
        """EN 17037:2018 daylight provision: daylight steps meeting each level's shares."""
        p = self.params
        for i, (kt, km) in enumerate(self.levels):
            ok_t = _share_at_least(step_counts[kt], self.space_size, p.en17037_target_area)
            ok_m = _share_at_least(step_counts[km], self.space_size, p.en17037_minimum_area)
            self.target[rows, :, i] += np.count_nonzero(ok_t & day_g, axis=-1)
            self.minimum[rows, :, i] += np.count_nonzero(ok_m & day_g, axis=-1)

    def counts(self, steps: dict[str, np.ndarray], batch: tuple[int, ...],
               spaced: bool) -> Counts:
        """The folded counts as :class:`Counts` of batch shape ``batch`` (grid-level
        counts with a space axis when ``spaced``)."""
        n_s, n_l = self.n_sensors, len(self.levels)
        sp = (self.n_sp,) if spaced else ()
        return Counts(
            **steps,
            **{k: v.reshape(*batch, n_s) for k, v in (*self.sensor.items(), *self.lux.items())},
            ana_shaded=self.shaded.reshape((*batch, *sp)),
            day_target_ok=self.target.reshape(*batch, *sp, n_l),
            day_minimum_ok=self.minimum.reshape(*batch, *sp, n_l),
        )


def accumulate(
    counts: Counts | None,
    total: np.ndarray,
    direct_sun: np.ndarray,
    masks: StepMasks,
    params: MetricParams,
    total_shaded: np.ndarray | None = None,
    *,
    transmittance: np.ndarray | None = None,
    shaded_transmittance: np.ndarray | None = None,
    space: np.ndarray | None = None,
) -> Counts:
    """Fold one time chunk of illuminance into the additive counts.

    Parameters
    ----------
    counts : Counts or None
        Counts of the chunks folded so far, or None to start.
    total : ndarray (..., n_sensors, n_steps) [lx]
        Illuminance with operable shading open (all light). Any memory layout
        (the engine passes time-major arrays as transposed views).
    direct_sun : ndarray (..., n_sensors, n_steps) [lx]
        The part of ``total`` from the sun's direct beam (shading open).
    masks : StepMasks
        Period masks of the chunk's steps, ``(n_steps,)`` or ``(..., n_steps)``.
    params : MetricParams
        Thresholds.
    total_shaded : ndarray (..., n_sensors, n_steps) [lx], optional
        Illuminance with the operable shading closed (LM-83 sDA rule); None when
        the study has no operable shading.
    transmittance : ndarray (n_variants,), optional
        When given, ``total`` and ``direct_sun`` are the illuminance of a single
        glazing set at unit normal transmittance and each variant v is folded as
        ``transmittance[v] × total`` (illuminance is linear in the transmittance,
        DESIGN §2.6): the counts gain a trailing variant axis, batch
        ``(..., n_variants)``. The products are formed grid by grid in a small
        buffer, exactly as the caller would form them (same float32 rounding).
    shaded_transmittance : ndarray (n_variants,), optional
        With ``transmittance``: the closed-shading transmittance of each variant
        (the LM-83 closed state is ``shaded_transmittance[v] × total``), instead
        of ``total_shaded``.
    space : ndarray (n_sensors,) of int, optional
        Index of the space that owns each sensor (0 … n_spaces − 1, every index
        present). Each space is its own grid for the grid-level counts: its own
        LM-83 shading group (its shading closes when more than 2 % of *its*
        sensors get direct sun; blinds are operated space by space, common
        practice) and its own EN 17037 reference plane. The counts
        ``ana_shaded``, ``day_target_ok`` and ``day_minimum_ok`` then gain a
        space axis before the level axis: ``(..., n_spaces)`` and
        ``(..., n_spaces, n_levels)``. None: the whole grid is one space and
        those counts have no space axis. A grid of one space gives the same
        counts either way.

    Returns
    -------
    Counts
        ``counts`` plus this chunk's counts (a new object; ``counts`` is not
        changed).

    Notes
    -----
    One grid (``(n_sensors, n_steps)``) is folded at a time, in pieces of
    :data:`FOLD_STEPS` steps so that every pass over it runs from the CPU
    cache; each distinct threshold is compared once per piece (into
    preallocated buffers laid out like the input, in the arrays' own
    precision). Counts over masked steps and lux sums are matrix–vector
    products of 0/1 indicators (or the illuminance) with the 0/1 step masks:
    integer counts are exact (below 2**24 steps per chunk in float32), lux sums
    are accumulated in the arrays' precision within a piece and in float64
    across pieces (exact for integer lux below 2**24 lx·steps per sensor and
    piece; relative rounding of a few 1e-7 otherwise). The stages of a piece
    are methods of :class:`_Fold`: threshold comparisons, direct sun and the
    LM-83 shading rule, sDA, EN 17037.
    """
    n_sensors, n_steps = total.shape[-2:]
    scaled = transmittance is not None
    if scaled and total_shaded is not None:
        raise ValueError("with transmittance, give shaded_transmittance instead of total_shaded")
    dtype = np.result_type(total.dtype, np.float32)
    tau = np.atleast_1d(np.asarray(transmittance if scaled else 1.0, dtype=dtype))
    tau_shut = (None if shaded_transmittance is None
                else np.atleast_1d(np.asarray(shaded_transmittance, dtype=dtype)))
    grid_batch = np.broadcast_shapes(
        total.shape[:-2], *(np.shape(m)[:-1] for m in (masks.occupied, masks.analysis,
                                                       masks.daylight)))
    batch = (*grid_batch, tau.size) if scaled else grid_batch
    # masks may vary per grid, never per variant: their counts broadcast over variants
    steps = _step_counts(StepMasks(*(np.expand_dims(m, -2) if scaled and np.ndim(m) > 1 else m
                                     for m in (masks.occupied, masks.analysis, masks.daylight))))
    grids = [np.broadcast_to(a, (*grid_batch, n_sensors, n_steps)).reshape(-1, n_sensors, n_steps)
             for a in (total, direct_sun) + (() if total_shaded is None else (total_shaded,))]
    occ, ana, day = (_grid_rows(m, grid_batch, n_steps)
                     for m in (masks.occupied, masks.analysis, masks.daylight))
    n_grids = grids[0].shape[0]
    width = min(FOLD_STEPS, n_steps)
    own = (np.zeros(n_sensors, np.intp) if space is None
           else np.asarray(space, dtype=np.intp).reshape(n_sensors))
    fold = _Fold(params, tau, tau_shut, n_grids * tau.size, n_sensors,
                 grids[0][0][:, :width], dtype, own)
    step_vec = np.empty((3, width), dtype=dtype)  # rows: occupied, analysis, every step
    for g in range(n_grids):
        rows = slice(g * tau.size, (g + 1) * tau.size)
        for lo in range(0, n_steps, width):
            hi = min(lo + width, n_steps)
            e, d = grids[0][g][:, lo:hi], grids[1][g][:, lo:hi]
            shut_e = grids[2][g][:, lo:hi] if total_shaded is not None else None
            m_occ, m_ana, m_all = step_vec[:, : hi - lo]
            m_occ[:], m_ana[:], m_all[:] = occ[g, lo:hi], ana[g, lo:hi], 1.0
            fold.sums(rows, e, m_occ, m_all)
            lit = bool(np.any(d))  # no direct sun in the piece: nothing to count or close
            fold.piece(rows, e, d if lit else None, shut_e, m_occ, m_ana, ana[g, lo:hi],
                       day[g, lo:hi])
    return _plus(counts, fold.counts(steps, batch, space is not None))


def _first_passing(x: float, tau: float, strict: bool, dtype: np.dtype) -> float:
    """The smallest unit illuminance u with ``fl(tau·u) ≥ x`` (``> x`` when strict).

    ``fl`` is rounding to ``dtype``: comparing u with this level gives the same
    answer as forming ``tau × u`` in ``dtype`` and comparing with ``x`` (the
    rounded product never decreases as u grows), so variants that scale one
    illuminance series are counted without forming their series.
    """
    t, x = dtype.type(tau), dtype.type(x)
    if not t > 0:
        return float("inf")

    def passes(u: Any) -> bool:
        return bool(t * u > x) if strict else bool(t * u >= x)

    u = dtype.type(float(x) / float(t))
    down, up = dtype.type(-np.inf), dtype.type(np.inf)
    while passes(np.nextafter(u, down)):
        u = np.nextafter(u, down)
    while not passes(u):
        u = np.nextafter(u, up)
    return float(u)


def accumulate_dark(
    counts: Counts | None,
    masks: StepMasks,
    params: MetricParams,
    batch_shape: tuple[int, ...],
    n_sensors: int,
    n_spaces: int | None = None,
) -> Counts:
    """Fold steps that the engine skipped because no light reaches the room.

    Equivalent to :func:`accumulate` with all-zero illuminance for these steps
    (tested), without allocating the arrays: the steps enter the denominators
    (occupied, analysis, daylight, all steps) and no numerator.

    Parameters
    ----------
    counts : Counts or None
        Counts so far, or None.
    masks : StepMasks
        Period masks of the skipped steps.
    params : MetricParams
        Thresholds (all must be positive, so zero illuminance passes none).
    batch_shape : tuple of int
        Leading batch shape of the other chunks.
    n_sensors : int
        Sensors of the grid.
    n_spaces : int, optional
        Spaces of the grid when the other chunks were folded with ``space``
        (grid-level counts per space, :func:`accumulate`); None otherwise.

    Returns
    -------
    Counts
        ``counts`` plus the skipped steps (a new object).
    """
    n_levels = len(params.en17037_levels)
    per_sensor = {f.name: np.zeros((*batch_shape, n_sensors),
                                   np.float64 if f.name.endswith("_lux") else np.int64)
                  for f in fields(Counts)
                  if f.name.startswith(("occ_", "all_", "ana_sda", "ana_ase"))}
    grid = (*batch_shape, *(() if n_spaces is None else (n_spaces,)))
    chunk = Counts(
        **_step_counts(masks), **per_sensor,
        ana_shaded=np.zeros(grid, np.int64),
        day_target_ok=np.zeros((*grid, n_levels), np.int64),
        day_minimum_ok=np.zeros((*grid, n_levels), np.int64),
    )
    return _plus(counts, chunk)


def shading_closed(direct_sun: np.ndarray, space: np.ndarray | None = None,
                   sun_threshold: float = 1000.0, sensor_fraction: float = 0.02) -> np.ndarray:
    """Steps in which a space's operable shading is closed, by the IES LM-83-12 rule.

    The shading of a space closes in a step when *more than* ``sensor_fraction``
    (2 %) of its sensors get *more than* ``sun_threshold`` (1000 lx) of direct
    sun (IES LM-83-12; one shading group per space, blinds operated space by
    space, common practice), in the same arithmetic as :func:`accumulate`
    applies for sDA. The one place the rule is written: the sDA counts (through
    :func:`accumulate`'s masks, in the analysis steps), the lighting control
    (:mod:`kernels.lighting`) and glare at the views (in every occupied step:
    blinds are operated whenever the space is occupied) all see the state it gives.

    Parameters
    ----------
    direct_sun : ndarray (..., n_sensors, n_steps) [lx]
        Direct-sun illuminance with the shading open, at the variant's
        transmittance (not a unit series).
    space : ndarray (n_sensors,) of int, optional
        Space of every sensor (every index 0 … n_spaces − 1 present); None: one space.
    sun_threshold : float [lx]
        1000 lx (IES LM-83-12), compared strictly.
    sensor_fraction : float [-]
        0.02 (IES LM-83-12), compared strictly and exactly as an integer ratio.

    Returns
    -------
    ndarray of bool (..., n_spaces, n_steps)
    """
    d = np.asarray(direct_sun)
    n_sensors = d.shape[-2]
    own = (np.zeros(n_sensors, np.intp) if space is None
           else np.asarray(space, dtype=np.intp).reshape(n_sensors))
    n_sp = int(own.max()) + 1 if own.size else 1
    dtype = np.result_type(d.dtype, np.float32)
    # fl(d) > x, as accumulate compares the τ = 1 series (its strict sun comparison)
    limit = dtype.type(_first_passing(float(sun_threshold), 1.0, True, dtype))
    members = (np.arange(n_sp)[:, None] == own[None, :]).astype(dtype)  # (n_sp, n_sensors)
    n_sunlit = (members @ (d >= limit).astype(dtype)).astype(np.int64)  # exact below 2**24
    size = np.bincount(own, minlength=n_sp).astype(np.int64)[:, None]
    return _share_more_than(n_sunlit, size, sensor_fraction)


def lm83_closed(direct_sun: np.ndarray, analysis: np.ndarray, params: MetricParams,
                space: np.ndarray | None = None) -> np.ndarray:
    """:func:`shading_closed` in the LM-83 analysis steps only (open outside them).

    Parameters
    ----------
    direct_sun : ndarray (..., n_sensors, n_steps) [lx]
        As in :func:`shading_closed`.
    analysis : ndarray (n_steps,) bool
        LM-83 analysis steps (:func:`lm83_analysis_mask`).
    params : MetricParams
        Its ``sun_threshold`` and ``shading_sensor_fraction``.
    space : ndarray (n_sensors,) of int, optional

    Returns
    -------
    ndarray (..., n_spaces, n_steps) bool
    """
    return (shading_closed(direct_sun, space, params.sun_threshold,
                           params.shading_sensor_fraction)
            & np.asarray(analysis, dtype=bool))


def merge_counts(*parts: Counts) -> Counts:
    """Add the counts of chunks folded separately (e.g. on different workers)."""
    merged = parts[0]
    for part in parts[1:]:
        merged = merged + part
    return merged


_STEP_FIELDS = ("n_steps", "n_occupied", "n_analysis", "n_daylight")
_SPACE_AXIS = {"ana_shaded": -1, "day_target_ok": -2, "day_minimum_ok": -2}


def join_counts(*parts: Counts) -> Counts:
    """The counts of a grid from those of disjoint groups of its spaces, folded apart.

    Each part holds the sensors of whole spaces, folded with ``space`` (its own
    spaces numbered from 0), over the same steps. The grid-level counts are per
    space, so no count couples two parts: per-sensor counts are joined along
    the sensor axis, per-space counts along the space axis, in the order given
    (the parts in sensor order). The result equals the counts of the whole grid
    folded at once, bit for bit.

    Raises
    ------
    ValueError
        When the parts were folded over different steps.
    """
    joined = {}
    for f in fields(Counts):
        values = [getattr(p, f.name) for p in parts]
        if f.name in _STEP_FIELDS:
            if any(not np.array_equal(values[0], v) for v in values[1:]):
                raise ValueError("the parts were folded over different steps")
            joined[f.name] = values[0]
        else:
            joined[f.name] = np.concatenate(values, axis=_SPACE_AXIS.get(f.name, -1))
    return Counts(**joined)


# ---------------------------------------------------------------------------
# results


def _per_step(count: np.ndarray, steps: np.ndarray) -> np.ndarray:
    """Share of steps; 0 where there are no steps in the period."""
    steps = np.asarray(steps, dtype=np.float64)[..., None]
    shape = np.broadcast_shapes(np.shape(count), steps.shape)
    return np.divide(count, steps, out=np.zeros(shape), where=steps > 0)


def space_mean(values: np.ndarray, space: np.ndarray | None = None) -> np.ndarray:
    """Mean of per-sensor values over each space's sensors.

    Parameters
    ----------
    values : ndarray (..., n_sensors)
        Per-sensor values (any unit).
    space : ndarray (n_sensors,) of int, optional
        Index of each sensor's space (0 … n_spaces − 1, every index present);
        None: one space holding every sensor.

    Returns
    -------
    ndarray (..., n_spaces)
        The plain mean over each space's sensors (its grid mean). One space:
        ``np.mean(values, axis=-1)`` itself, bit for bit.
    """
    values = np.asarray(values)
    if space is None or not np.any(space):
        return np.mean(values, axis=-1)[..., None]
    own = np.asarray(space)
    # each space's values as their own contiguous grid: the same sums, in the same order,
    # as a grid of that space alone
    return np.stack([np.mean(np.ascontiguousarray(values[..., own == k]), axis=-1)
                     for k in range(int(own.max()) + 1)], axis=-1)


def area_weighted(space_values: np.ndarray, area: np.ndarray | None = None) -> np.ndarray:
    """Building value of per-space grid means: their mean weighted by grid area.

    Parameters
    ----------
    space_values : ndarray (..., n_spaces)
        A grid mean of each space.
    area : ndarray (n_spaces,) [m²], optional
        Floor area covered by each space's grid. Needed for more than one space;
        one space needs none (and may be NaN: sensors read from a file).

    Returns
    -------
    ndarray (...)
        Σ_k w_k v_k with w_k = A_k / Σ A: the mean over the building's floor
        area of the spaces' grid means (CONTRACT.md §3). One space: its value
        exactly (w = 1).

    Raises
    ------
    ValueError
        When several spaces have no positive finite area.
    """
    v = np.asarray(space_values, dtype=np.float64)
    n = v.shape[-1]
    if n == 1:
        return v[..., 0] * 1.0
    a = np.asarray(area, dtype=np.float64).reshape(n) if area is not None else None
    if a is None or not np.all(np.isfinite(a) & (a > 0)):
        raise ValueError(f"{n} spaces need a positive grid area each to weight their means, "
                         f"got {None if a is None else a.tolist()}")
    return np.sum(v * (a / a.sum()), axis=-1)


def finalize(counts: Counts, params: MetricParams, space: np.ndarray | None = None,
             area: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """Metrics from accumulated counts (definitions in the module docstring).

    Parameters
    ----------
    counts : Counts
        From :func:`accumulate` / :func:`accumulate_dark` / :func:`merge_counts`.
    params : MetricParams
        The same thresholds used to accumulate.
    space : ndarray (n_sensors,) of int, optional
        The sensors' spaces, as given to :func:`accumulate` (its counts then
        have a space axis). Adds the per-space results.
    area : ndarray (n_spaces,) [m²], optional
        Floor area of each space's grid (the weight of its means in the
        building's); needed with more than one space.

    Returns
    -------
    dict of str to ndarray
        Per sensor ``(..., n_sensors)``: ``daylight_autonomy``,
        ``continuous_daylight_autonomy``, ``udi_low``, ``udi_supplementary``,
        ``udi_autonomous``, ``udi_high`` [fraction 0–1], ``mean_illuminance``
        [lx], ``light_exposure`` [lx·h], ``direct_sun_hours`` [h],
        ``sda_fraction`` [0–1], ``ase_hours`` [h]. Per grid ``(...)``:
        ``sda``, ``ase`` [%], ``udi_useful_mean``, ``daylight_autonomy_mean``
        [0–1], ``shading_hours`` [h],
        ``en17037_level`` (int8, 0–3). With ``space``, also each of these per
        space ``(..., n_spaces)`` named ``space_<name>``, and the per-grid
        results are the building's: ``sda`` and ``ase`` over the sensors of all
        spaces together (IES LM-83-12 pools the analysis area), the means and
        ``shading_hours`` weighted by grid area (:func:`area_weighted`),
        ``en17037_level`` the lowest level among the spaces. One space gives
        the same per-grid results with or without ``space``.
    """
    occ = counts.n_occupied
    h = params.step_hours
    ge_e0 = counts.occ_udi_reach_supplementary
    ge_e1 = counts.occ_udi_reach_autonomous
    gt_e2 = counts.occ_udi_high
    out: dict[str, np.ndarray] = {
        "daylight_autonomy": _per_step(counts.occ_da, occ),
        "continuous_daylight_autonomy": _per_step(counts.occ_cda_lux, occ)
        / params.da_threshold,
        "udi_low": _per_step(np.asarray(occ)[..., None] - ge_e0, occ),
        "udi_supplementary": _per_step(ge_e0 - ge_e1, occ),
        "udi_autonomous": _per_step(ge_e1 - gt_e2, occ),
        "udi_high": _per_step(gt_e2, occ),
        "mean_illuminance": _per_step(counts.occ_sum_lux, occ),
        "light_exposure": counts.all_sum_lux * h,
        "direct_sun_hours": counts.occ_sun * h,
        "sda_fraction": _per_step(counts.ana_sda, counts.n_analysis),
        "ase_hours": counts.ana_ase * h,
    }
    # per space (one space without `space`), then the building
    spaces: dict[str, np.ndarray] = {
        "udi_useful_mean": space_mean(out["udi_supplementary"] + out["udi_autonomous"], space),
        "daylight_autonomy_mean": space_mean(out["daylight_autonomy"], space),
    }
    for name in ("udi_useful_mean", "daylight_autonomy_mean"):
        out[name] = area_weighted(spaces[name], area)

    n_ana = np.asarray(counts.n_analysis)[..., None]
    sda_ok = _share_at_least(counts.ana_sda, n_ana, params.sda_time_fraction)
    sda_ok &= n_ana > 0
    spaces["sda"] = 100.0 * space_mean(sda_ok, space)
    out["sda"] = 100.0 * np.mean(sda_ok, axis=-1)  # pooled over every sensor (LM-83-12)
    # "more than 250 hours", compared exactly: count · step_hours > ase_hours_limit
    step = Fraction(str(h)).limit_denominator(10**6)
    limit = Fraction(str(params.ase_hours_limit)).limit_denominator(10**6)
    over = counts.ana_ase * (step.numerator * limit.denominator) > (
        limit.numerator * step.denominator
    )
    spaces["ase"] = 100.0 * space_mean(over, space)
    out["ase"] = 100.0 * np.mean(over, axis=-1)
    shaded = counts.ana_shaded if space is not None else counts.ana_shaded[..., None]
    spaces["shading_hours"] = shaded * h
    out["shading_hours"] = area_weighted(spaces["shading_hours"], area)

    target_ok, minimum_ok = en17037_pass(counts, params)
    met = np.cumprod(target_ok & minimum_ok, axis=-1)  # a level counts only with all below it
    level = met.sum(axis=-1).astype(np.int8)
    spaces["en17037_level"] = level if space is not None else level[..., None]
    out["en17037_level"] = spaces["en17037_level"].min(axis=-1)  # the lowest space's level
    if space is not None:
        out.update({f"space_{name}": value for name, value in spaces.items()})
    return out


def _per_day(count: np.ndarray, counts: Counts) -> np.ndarray:
    """Daylight steps shaped to broadcast against a grid-level count ``(..., [n_spaces,]
    n_levels)``."""
    n_day = np.asarray(counts.n_daylight)
    return n_day.reshape(n_day.shape + (1,) * (np.ndim(count) - n_day.ndim))


def en17037_pass(
    counts: Counts, params: MetricParams
) -> tuple[np.ndarray, np.ndarray]:
    """EN 17037 target and minimum-target tests per level, ``(..., [n_spaces,] n_levels)``
    bool (per space when the counts were folded with spaces)."""
    n_day = _per_day(counts.day_target_ok, counts)
    ok_t = _share_at_least(counts.day_target_ok, n_day, params.en17037_time) & (n_day > 0)
    ok_m = _share_at_least(counts.day_minimum_ok, n_day, params.en17037_time) & (n_day > 0)
    return ok_t, ok_m


def en17037_time_fractions(
    counts: Counts, params: MetricParams
) -> tuple[np.ndarray, np.ndarray]:
    """Shares of daylight hours meeting each level's target and minimum target.

    Returns
    -------
    target, minimum : ndarray (..., [n_spaces,] n_levels) [0–1]
        Share of daylight steps with E ≥ target over ≥ 50 % of the grid, and
        with E ≥ minimum target over ≥ 95 % of it (EN 17037:2018).
    """
    n_day = _per_day(counts.day_target_ok, counts).astype(np.float64)
    return tuple(np.divide(c, n_day, out=np.zeros(np.broadcast_shapes(c.shape, n_day.shape)),
                           where=n_day > 0)
                 for c in (counts.day_target_ok, counts.day_minimum_ok))


def daylight_factor_stats(daylight_factor: np.ndarray) -> dict[str, np.ndarray]:
    """Grid statistics of per-sensor daylight factors.

    Parameters
    ----------
    daylight_factor : ndarray (..., n_sensors) [%]
        Daylight factor of each sensor under the CIE overcast sky (from the engine).

    Returns
    -------
    dict
        ``daylight_factor_mean``, ``daylight_factor_median``,
        ``daylight_factor_min`` [%] and ``daylight_factor_uniformity``
        (minimum / mean, [-]; common practice), each of shape ``(...)``.
    """
    df = np.asarray(daylight_factor, dtype=np.float64)
    mean = df.mean(axis=-1)
    low = df.min(axis=-1)
    return {
        "daylight_factor_mean": mean,
        "daylight_factor_median": np.median(df, axis=-1),
        "daylight_factor_min": low,
        "daylight_factor_uniformity": np.divide(
            low, mean, out=np.zeros_like(mean), where=mean > 0
        ),
    }
