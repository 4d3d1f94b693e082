"""Benchmark of kernels.sky.sky_vectors against one matmul that consumes its output.

A full year at 15-minute steps, 12 orientations, MF4 (2305 patches + ground), on a
bundled pvlib TMY3 file; the reference is one float32 product of a 200-sensor
coefficient matrix with every orientation's sky matrix (what the engine does per
glazing set and coefficient family). Prints both times and their ratio.
"""

from __future__ import annotations

import time
import warnings
from pathlib import Path

import numpy as np
import pvlib

from kernels import climate, sky, sun


def main(n_sensors: int = 200, subdivision: int = 4, step: int = 15, n_orient: int = 12) -> None:
    path = Path(pvlib.__file__).parent / "data" / "723170TYA.CSV"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        clim = climate.read_climate(path)
    scheme = sky.patch_scheme(subdivision)
    points = sun.SunPoints()
    points.weights(np.array([[0.0, 0.0, 1.0]]))  # build the triangulation outside the timing
    t0 = time.perf_counter()
    clim_r = sun.resample(clim, step)
    t1 = time.perf_counter()
    orient = np.linspace(0.0, 330.0, n_orient)
    sv = sky.sky_vectors(clim_r, orient, scheme, points, step)
    t2 = time.perf_counter()
    coeffs = np.random.default_rng(0).random((n_sensors, scheme.n_basis), dtype=np.float32)
    flat = sv.sky.transpose(1, 0, 2).reshape(scheme.n_basis, -1)
    t3 = time.perf_counter()
    out = coeffs @ flat
    t4 = time.perf_counter()
    print(f"resample {t1 - t0:.1f} s; sky_vectors {t2 - t1:.1f} s "
          f"(sky {sv.sky.shape}, {sv.sky.nbytes / 2**30:.2f} GiB)")
    print(f"matmul ({n_sensors} x {scheme.n_basis}) @ ({scheme.n_basis} x {flat.shape[1]}): "
          f"{t4 - t3:.1f} s -> ratio sky_vectors / matmul = {(t2 - t1) / (t4 - t3):.2f}")
    assert np.isfinite(out).all()


if __name__ == "__main__":
    main()
