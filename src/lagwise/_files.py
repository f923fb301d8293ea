"""Locations of the bundled static files (CSS, demo data), in a checkout and after an install.

An installed package ships them as `lagwise/assets` and `lagwise/demo_data` (package data mapped
from the repository's top-level `assets/` and `demo_data/`); in a source checkout this file sits
in `src/lagwise/` and the folders are two levels up.
"""

from pathlib import Path

_HERE = Path(__file__).resolve().parent


def _find(name: str) -> Path:
    for candidate in (_HERE / name, _HERE.parent.parent / name):
        if candidate.is_dir():
            return candidate
    raise FileNotFoundError(f"bundled folder '{name}' not found")


def assets_dir() -> Path:
    """The folder holding the dashboard's CSS, script and favicon."""
    return _find("assets")


def demo_dir() -> Path:
    """The folder holding the simulated demo data sets and their seeded generators."""
    return _find("demo_data")


def demo_file(name: str = "freight_index.csv") -> Path:
    """Path of a bundled, simulated demo data set (default: the monthly freight index)."""
    return demo_dir() / name
