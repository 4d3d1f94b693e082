"""A made-up results store for the rank and report tests (not physics).

The scenario is invented ("harbour-lane-studios"); its illuminance series come
from a simple made-up model, and its metrics are computed from those series by
the real :mod:`kernels.metrics` accumulator. The store follows CONTRACT.md §3
and the attribute names of ``sweep/store.py`` (``study`` holds the study text).
"""

from __future__ import annotations

import functools
import itertools
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from luxsweep.kernels.metrics import (
    MetricParams,
    StepMasks,
    accumulate,
    daylight_factor_stats,
    finalize,
    lm83_analysis_mask,
    occupancy_mask,
)

STUDY_TEXT = """\
name: harbour-lane-studios
climates:
  coastal: climates/coastal.epw
  inland: climates/inland.epw
room:
  width: 6.0
  depth: 7.0
  height: 3.0
  reflectance: {floor: 0.2, walls: 0.5, ceiling: 0.7}
  windows:
    - {wall: front, width: 4.0, sill: 0.9, head: 2.7, offset: 0.0, glazing: main}
    - {wall: roof, width: 1.0, length: 1.2, x: 3.0, y: 5.5, glazing: main}
glazings:
  main: {transmittance: 0.70, panes: 2}
grid: {height: 0.8, spacing: 0.75, margin: 0.5}
occupancy: {start: "08:00", end: "18:00", days: weekdays}
timestep: 60
vary:
  orientation: [90, 180, 270]
  climate: [coastal, inland]
  glazings.main.transmittance: [0.70, 0.40]
  room.windows.0.width: [2.5, 4.5]
metrics: [daylight_factor, daylight_autonomy, udi, sda_ase, en17037]
store_series: true
rank:
  require:
    - {metric: sda, at_least: 40}
    - {metric: ase, at_most: 10}
  prefer:
    - {metric: udi_useful_mean, goal: max, weight: 1.0}
    - {metric: daylight_factor_mean, goal: max, weight: 0.5}
"""

AXES = {
    "orientation": [90, 180, 270],
    "climate": ["coastal", "inland"],
    "glazings.main.transmittance": [0.70, 0.40],
    "room.windows.0.width": [2.5, 4.5],
}
NOT_DONE = (5, 17)  # variants whose `done` flag stays False


def sensors() -> np.ndarray:
    xs = np.arange(0.5, 6.0 - 0.5 + 1e-9, 0.75)
    ys = np.arange(0.5, 7.0 - 0.5 + 1e-9, 0.75)
    x, y = np.meshgrid(xs, ys, indexing="xy")
    return np.column_stack([x.ravel(), y.ravel(), np.full(x.size, 0.8)])


def _outdoor(times: pd.DatetimeIndex, climate: str, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Made-up outdoor diffuse horizontal illuminance and a sun-hour profile [lx]."""
    mid = times - pd.Timedelta(minutes=30)
    hour = np.asarray(mid.hour + mid.minute / 60.0)
    doy = np.asarray(mid.day_of_year)
    season = 0.55 + 0.45 * np.cos(2 * np.pi * (doy - 172) / 365)
    day_length = 12 + 3.5 * np.cos(2 * np.pi * (doy - 172) / 365)
    phase = (hour - (12 - day_length / 2)) / day_length
    up = np.clip(np.sin(np.pi * phase), 0, None) * ((phase > 0) & (phase < 1))
    rng = np.random.default_rng(seed)
    daily = rng.random(366)[doy - 1]
    clear = daily < (0.35 if climate == "coastal" else 0.55)
    diffuse = 30000 * up * season * np.where(clear, 0.6, 1.0)
    beam = 60000 * up * season * clear
    return diffuse, beam, hour, up > 0


def make_dataset(series: bool = True) -> xr.Dataset:
    """The made-up store as an in-memory Dataset (24 variants, 63 sensors)."""
    ds = _full_dataset().copy()
    if not series:
        ds = ds.drop_vars(["illuminance", "direct_sun_illuminance", "time"])
        ds.attrs["study"] = STUDY_TEXT.replace("store_series: true", "store_series: false")
    return ds


@functools.cache
def _full_dataset() -> xr.Dataset:
    series = True
    times = pd.date_range("2023-01-01 01:00", periods=8760, freq="h")
    occ = occupancy_mask(times, "08:00", "18:00", "weekdays")
    pts = sensors()
    x, y = pts[:, 0], pts[:, 1]
    variants = list(itertools.product(*AXES.values()))
    params = MetricParams()
    ana = lm83_analysis_mask(times)
    per_sensor: dict[str, list] = {}
    per_variant: dict[str, list] = {}
    ill, sun = [], []
    for orient, climate, tau, width in variants:
        diffuse, beam, hour, day = _outdoor(times, climate, seed=1 if climate == "coastal" else 2)
        df = (tau / 0.7) * (width / 4.0) * 14.0 * np.exp(-y / 3.0) * (1 - 0.25 * np.abs(x - 3) / 3)
        df = df + 0.6 * np.exp(-((x - 3) ** 2 + (y - 5.5) ** 2) / 2)  # roof window
        facing = {90: (hour < 10), 180: (hour > 9) & (hour < 16), 270: (hour > 15)}[orient]
        patch = (y < 1.5) & (np.abs(x - 3) < width / 2)
        direct = (0.08 * tau * patch[:, None] * (beam * facing)[None, :]).astype(np.float32)
        total = (df[:, None] / 100 * diffuse[None, :] + direct).astype(np.float32)
        masks = StepMasks(occupied=occ, analysis=ana, daylight=day)
        r = finalize(accumulate(None, total, direct, masks, params, total * 0.5), params)
        r["daylight_factor"] = df
        r.update(daylight_factor_stats(df))
        for k, v in r.items():
            (per_sensor if np.ndim(v) == 1 else per_variant).setdefault(k, []).append(v)
        if series:
            ill.append(total[:, occ])
            sun.append(direct[:, occ])
    done = np.ones(len(variants), bool)
    done[list(NOT_DONE)] = False

    def blank(a):  # results of unfinished variants are the store's fill value (NaN)
        a = np.asarray(a, dtype=np.float32 if np.asarray(a).dtype.kind == "f" else a[0].dtype)
        a[~done] = np.nan if a.dtype.kind == "f" else 0
        return a

    data = {k: (("variant", "sensor"), blank(v)) for k, v in per_sensor.items()}
    data.update({k: (("variant",), blank(v)) for k, v in per_variant.items()})
    data["done"] = (("variant",), done)
    coords = {
        "variant_id": ("variant", np.array([f"{i:04x}{'c0ffee' * 2}"
                                            for i in range(len(variants))], dtype=object)),
        "label": ("variant", np.array([" ".join(f"{a}={v}" for a, v in zip(AXES, c, strict=True))
                                       for c in variants], dtype=object)),
        "x": ("sensor", x), "y": ("sensor", y), "z": ("sensor", pts[:, 2]),
    }
    for j, axis in enumerate(AXES):
        values = np.array([c[j] for c in variants])
        coords[axis] = ("variant", values.astype(object) if values.dtype.kind == "U" else values)
    if series:
        data["illuminance"] = (("variant", "sensor", "time"), blank(np.stack(ill)))
        data["direct_sun_illuminance"] = (("variant", "sensor", "time"), blank(np.stack(sun)))
        coords["time"] = ("time", np.asarray(times[occ]))
    attrs = {
        "study_hash": "0" * 16,
        "luxsweep_version": "0.1.0",
        "study": STUDY_TEXT,
        "study_name": "harbour-lane-studios",
        "axes": list(AXES),
    }
    return xr.Dataset(data, coords=coords, attrs=attrs)


def write_store(path: Path, series: bool = True) -> Path:
    """Write the made-up store as Zarr v3 and return its path."""
    ds = make_dataset(series)
    encoding = {k: {"chunks": (1, *ds[k].shape[1:])} for k in ds.data_vars}
    if series:
        for k in ("illuminance", "direct_sun_illuminance"):
            encoding[k] = {"chunks": (1, ds.sizes["sensor"], 1024)}
    ds.to_zarr(path, mode="w-", zarr_format=3, encoding=encoding, consolidated=False)
    return path
