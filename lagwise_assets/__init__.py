"""Locations of the bundled static files (CSS, demo data), also after a non-editable install.

In a source checkout the folders are the top-level `assets/` and `demo_data/`; an installed
package ships them as `lagwise_assets.assets` and `lagwise_assets.demo_data`.
"""

from pathlib import Path

_HERE = Path(__file__).resolve().parent
_REPO = _HERE.parent


def _find(name: str) -> Path:
    for candidate in (_HERE / name, _REPO / name):
        if candidate.is_dir():
            return candidate
    raise FileNotFoundError(f"bundled folder '{name}' not found")


def assets_dir() -> Path:
    return _find("assets")


def demo_dir() -> Path:
    return _find("demo_data")


def demo_file() -> Path:
    return demo_dir() / "freight_index.csv"
