"""Copy the two real TMY3 years bundled with pvlib into examples/climates/.

The example studies refer to ``climates/piedmont.csv`` (pvlib's 723170TYA.CSV)
and ``climates/coast.csv`` (pvlib's 703165TY.csv). Run once:

    python examples/get_climates.py
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pvlib

SOURCES = {"piedmont.csv": "723170TYA.CSV", "coast.csv": "703165TY.csv"}


def main() -> None:
    data = Path(pvlib.__file__).parent / "data"
    here = Path(__file__).resolve().parent
    for folder in (here / "climates", here / "mesh-studio" / "climates"):
        folder.mkdir(exist_ok=True)
        for target, source in SOURCES.items():
            shutil.copyfile(data / source, folder / target)
            print(f"{folder / target}  <-  pvlib/data/{source}")


if __name__ == "__main__":
    main()
