"""luxsweep numerical kernels: arrays in, arrays out (no Dask, no result stores).

Modules: climate, sun, sky, geometry, raytrace, glazing, transfer, coefficients,
timeseries, metrics.

``KERNEL_VERSION`` enters every coefficient cache key
(:func:`kernels.coefficients.coefficient_key`). It is derived, not edited by
hand: a digest of the source files of the modules that compute coefficient
arrays (:data:`COEFFICIENT_MODULES`), so any change to them — a fix, a new
sampling, a faster path — gives new keys and the cache never serves arrays an
older kernel computed. Edits that cannot change the arrays (comments,
docstrings) move the key too: a recomputation is the price of never trusting a
hand-kept version.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

__all__ = ["COEFFICIENT_MODULES", "KERNEL_VERSION", "RESULTS_MODULES", "RESULTS_VERSION",
           "source_digest"]

COEFFICIENT_MODULES = ("coefficients", "geometry", "glazing", "raytrace", "sky", "sun",
                       "transfer")
"""Kernel modules whose code computes coefficient arrays: the coefficient stages
and their element transfer, the room mesh and its canonical form, ray casting,
glazing optics, sky patches and their sampling, and the sun points."""


def source_digest(folder: str | Path, modules: tuple[str, ...] = COEFFICIENT_MODULES) -> str:
    """SHA-256 hex digest of the sources ``<folder>/<module>.py`` of ``modules``.

    Parameters
    ----------
    folder : str or Path
        The folder holding the modules (this package's own for the key).
    modules : tuple of str
        Module names, hashed in this order with their names; line endings are
        normalised to ``\\n`` so a checkout's line-ending setting does not matter.

    Returns
    -------
    str
        64 hex digits.
    """
    digest = hashlib.sha256()
    for name in modules:
        path = Path(folder) / f"{name}.py"
        try:
            text = path.read_bytes()
        except OSError as exc:  # an install without sources cannot key its cache safely
            raise RuntimeError(
                f"cannot read {path}: the coefficient cache key is derived from the kernel "
                "sources, so luxsweep must be installed with its .py files") from exc
        digest.update(name.encode("ascii") + b"\0")
        digest.update(text.replace(b"\r\n", b"\n") + b"\0")
    return digest.hexdigest()


KERNEL_VERSION = "src-" + source_digest(Path(__file__).parent)[:32]
"""Version of the coefficient kernels, derived from their sources (see module docstring)."""

RESULTS_MODULES = (*COEFFICIENT_MODULES, "climate", "timeseries", "metrics", "sunlight", "view",
                   "lighting", "glare")
"""Kernel modules whose code shapes stored results: the coefficient modules plus the
weather readers, the annual series, the metrics, the EN 17037 sunlight and view-out
results, the electric lighting energy and glare at the views."""

RESULTS_VERSION = "src-" + source_digest(Path(__file__).parent, RESULTS_MODULES)[:32]
"""Version of the kernels that compute results, derived like :data:`KERNEL_VERSION`.
It enters a results store's ``study_hash``, so a store is never resumed by code that
would compute its remaining variants differently (half old, half new results)."""
