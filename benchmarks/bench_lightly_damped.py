"""On demand: `explore --trials 4` on the hostile corpus's "lightly damped 1e5" study
(a 1e5 rad/s resonance with ζ = 0.005; issue 19), wall time and peak RSS of the child.

    OMP_NUM_THREADS=1 python benchmarks/bench_lightly_damped.py

Measured 4 December 2026 (shared two-core machine): 40.6 s and 503 MiB; before the
per-mode step rule (explorer/time_domain/modal_step.py) 369 s and 1.1 GB.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from hostile_corpus import EXTREME, extreme_study  # noqa: E402


def main() -> int:
    (plant, comp) = next((p, c) for name, p, c, _, _ in EXTREME if name == "lightly damped 1e5")
    with tempfile.TemporaryDirectory() as tmp:
        study = Path(tmp) / "study.toml"
        study.write_text(extreme_study(plant, comp), encoding="utf-8")
        t0 = time.monotonic()
        proc = subprocess.Popen([sys.executable, "-m", "explorer", "explore", str(study),
                                 "--out", str(Path(tmp) / "out"), "--trials", "4",
                                 "--seed", "1", "--json"],
                                stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        _, status, usage = os.wait4(proc.pid, 0)
        wall = time.monotonic() - t0
    code = os.waitstatus_to_exitcode(status)
    print(f"explore --trials 4, lightly damped 1e5: exit {code}, {wall:.1f} s, "
          f"peak RSS {usage.ru_maxrss / 1024:.0f} MiB")
    return 0 if code == 0 else 1


if __name__ == "__main__":
    raise SystemExit(main())
