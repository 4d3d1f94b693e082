"""The coefficient cache key follows the kernel sources (kernels.KERNEL_VERSION is derived).

The cache's validity rests on the key: a change to any code that computes
coefficient arrays must give new keys, so a stored set computed by older code
is never served. These checks fail when the version stops following the
sources, or when a module that coefficient computation imports is left out of
the hashed list.
"""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np

from luxsweep import kernels
from luxsweep.kernels.coefficients import Settings, coefficient_key
from luxsweep.kernels.geometry import parametric_room, sensor_grid

KERNELS = Path(kernels.__file__).parent
# imported by the coefficient modules but computing nothing that enters the arrays:
# error classes, and the weather-file reader (kernels.sun imports its Site record)
NOT_HASHED = {"errors", "climate"}


def _copy(tmp_path: Path) -> Path:
    folder = tmp_path / "kernels"
    shutil.copytree(KERNELS, folder, ignore=shutil.ignore_patterns("__pycache__"))
    return folder


def test_version_is_the_digest_of_the_coefficient_sources(tmp_path):
    folder = _copy(tmp_path)
    assert kernels.KERNEL_VERSION == "src-" + kernels.source_digest(folder)[:32]
    base = kernels.source_digest(folder)
    for name in kernels.COEFFICIENT_MODULES:  # any edit of any of them moves it
        path = folder / f"{name}.py"
        original = path.read_bytes()
        path.write_bytes(original.replace(b"import", b"import ", 1))
        assert kernels.source_digest(folder) != base, name
        path.write_bytes(original)
    # a module that never touches coefficient arrays does not
    (folder / "timeseries.py").write_bytes(b"# edited\n" + (folder / "timeseries.py").read_bytes())
    assert kernels.source_digest(folder) == base
    # line endings of the checkout do not matter
    path = folder / "glazing.py"
    path.write_bytes(path.read_bytes().replace(b"\n", b"\r\n"))
    assert kernels.source_digest(folder) == base


def test_every_module_coefficients_import_is_hashed():
    # in a fresh interpreter: the kernel modules loaded by importing the coefficient
    # computation must all be hashed (or be listed above with a reason)
    # (after a small computation: some imports are deferred to first use)
    code = (
        "import json, sys\n"
        "from luxsweep.kernels.coefficients import Settings, compute_coefficients\n"
        "from luxsweep.kernels.geometry import parametric_room, sensor_grid\n"
        "w = [{'wall': 'front', 'width': 1.0, 'sill': 0.9, 'head': 2.0, 'offset': 0.0,"
        " 'glazing': 'main'}]\n"
        "g = parametric_room(3.0, 3.0, 2.7, w, {'floor': 0.2, 'walls': 0.5, 'ceiling': 0.7},"
        " {'main': 2})\n"
        "s = Settings(subdivision=1, sun_spacing=6.0, sky_rays_per_patch=4, ground_rays=64,"
        " element_size=1.5, element_rays=16, sensor_rays=64, reflected_sun_spacing=12.0)\n"
        "compute_coefficients(g, sensor_grid(3.0, 3.0, 0.8, 1.5, 0.5), s)\n"
        "print(json.dumps(sorted(m.rsplit('.', 1)[1] for m in sys.modules"
        " if m.startswith('luxsweep.kernels.'))))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout
    loaded = set(json.loads(out))
    assert loaded - NOT_HASHED <= set(kernels.COEFFICIENT_MODULES)
    assert set(kernels.COEFFICIENT_MODULES) <= loaded  # no stale names in the list


def test_key_changes_with_the_version(monkeypatch):
    windows = [{"wall": "front", "width": 2.0, "sill": 0.9, "head": 2.1, "offset": 0.0,
                "glazing": "main"}]
    geo = parametric_room(4.0, 5.0, 3.0, windows, {"floor": 0.2, "walls": 0.5, "ceiling": 0.7},
                          {"main": 2})
    sensors = sensor_grid(4.0, 5.0, 0.8, 1.0, 0.5)
    assert isinstance(sensors, np.ndarray)
    key = coefficient_key(geo, sensors, Settings())
    assert coefficient_key(geo, sensors, Settings()) == key  # deterministic
    monkeypatch.setattr(kernels, "KERNEL_VERSION", kernels.KERNEL_VERSION + "-edited")
    assert coefficient_key(geo, sensors, Settings()) != key
