"""The bundled demo cell: an invented six-axis arm tending an invented machine (see cell.toml)."""

from pathlib import Path


def demo_cell_path() -> Path:
    """Path of the bundled demo cell file (inside the installed package)."""
    return Path(__file__).resolve().parent / "cell.toml"
