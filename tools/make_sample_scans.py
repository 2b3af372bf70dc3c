"""Make the demo's sample scans again: ``python tools/make_sample_scans.py [FOLDER]``.

The files are deterministic (fixed seeds); by default they go to
``sample_scans/`` beside this folder.  See stripscan/sim/demo_data.py for the
invented scenario.
"""

import sys
from pathlib import Path

from stripscan.sim.demo_data import generate

if __name__ == "__main__":
    target = Path(sys.argv[1]) if len(sys.argv) > 1 else Path(__file__).resolve().parents[1] / "sample_scans"
    files = generate(target)
    for path in files.all_paths():
        print(f"{path}  {path.stat().st_size / 1e6:.2f} MB")
