"""luxsweep numerical kernels: arrays in, arrays out (no Dask, no result stores).

Modules: climate, sun, sky, geometry, raytrace, glazing, transfer, coefficients,
timeseries, metrics.
"""

KERNEL_VERSION = "3"
