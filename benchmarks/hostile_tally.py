"""The hostile-input tally of issue 19, on demand: every input of tests/hostile_corpus.py
through the real command line (each run its own process, two at a time), with the
outcome table by command, the slowest run and the largest peak RSS.

    OMP_NUM_THREADS=1 python benchmarks/hostile_tally.py            # the whole corpus
    OMP_NUM_THREADS=1 python benchmarks/hostile_tally.py --group found   # the issue's list
    python benchmarks/hostile_tally.py --json --jobs 2 --progress

Exit status 1 when any run is an internal error, a hang, a blow-up, a wrong answer or a
messy refusal. The budgets (hang detector, RSS) are stated in docs/hostile-input.md.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from hostile_corpus import main  # noqa: E402

if __name__ == "__main__":
    raise SystemExit(main())
