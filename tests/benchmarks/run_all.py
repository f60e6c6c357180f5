"""Run every benchmark in this folder, one after another (`make bench`)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

here = Path(__file__).resolve().parent
status = 0
for script in sorted(here.glob("bench_*.py")):
    print(f"\n=== {script.name} ===", flush=True)
    status |= subprocess.call([sys.executable, str(script)])
sys.exit(status)
