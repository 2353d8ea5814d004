"""The bundled demo: a 4-second, 16-channel synthetic recording with its ground truth, and a
2-second, 32-site synthetic probe recording with its site positions and ground truth.

Made with ``rigside synth sample_data/demo.bin --seconds 4 --seed 0`` and ``rigside synth
sample_data/probe_demo.bin --probe --sites 32 --seconds 2 --seed 0``; carried in the wheel as package
data and found through :mod:`importlib.resources`, so ``rigside demo`` works from any install.
"""

from importlib.resources import files
from pathlib import Path


def demo_path() -> Path:
    """Path of the bundled demo recording (its metadata and truth files lie beside it)."""
    return Path(str(files(__name__) / "demo.bin"))


def probe_demo_path() -> Path:
    """Path of the bundled probe demo recording (metadata with the ``[probe]`` table and truth beside it)."""
    return Path(str(files(__name__) / "probe_demo.bin"))
