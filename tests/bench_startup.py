"""Benchmark: start-up, as ratios against `python -c "import numpy"` measured side by side.

Run it by hand (pytest does not collect it), best on an idle machine:

    .venv/bin/python tests/bench_startup.py [--repeats 7]

It prints the wall time of `quadrat -c help` (as `python -m shell.main -c help`) and of
`python -c "import numpy"`, each the best of several runs taken in turn, and their ratio
(target <= 3); then which of the slow imports (scipy.stats, sympy, prompt_toolkit) a
`-c help` run loaded, read from the child's own `sys.modules`.
"""

from __future__ import annotations

import argparse
import math
import os
import subprocess
import sys
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
HEAVY = ("scipy.stats", "sympy", "prompt_toolkit", "scipy.special", "scipy.optimize")


def wall(args: list[str]) -> float:
    env = dict(os.environ, PYTHONPATH=ROOT, NO_COLOR="1")
    t0 = time.perf_counter()
    subprocess.run(args, cwd=ROOT, env=env, stdout=subprocess.DEVNULL,
                   stderr=subprocess.DEVNULL, check=False)
    return time.perf_counter() - t0


def loaded_by_help() -> list[str]:
    code = ("import sys, io, contextlib\n"
            "from shell.main import main\n"
            "with contextlib.redirect_stdout(io.StringIO()):\n"
            "    try:\n        main(['-c', 'help'])\n    except SystemExit:\n        pass\n"
            f"print(' '.join(m for m in {HEAVY!r} if m in sys.modules))\n")
    env = dict(os.environ, PYTHONPATH=ROOT, NO_COLOR="1")
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=env, capture_output=True,
                         text=True, check=False)
    return out.stdout.split()


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=7)
    args = ap.parse_args(argv)
    helps, numpys = math.inf, math.inf
    for _ in range(args.repeats):
        numpys = min(numpys, wall([sys.executable, "-c", "import numpy"]))
        helps = min(helps, wall([sys.executable, "-m", "shell.main", "-c", "help"]))
    print(f"python -c 'import numpy': {numpys:.3f} s   quadrat -c help: {helps:.3f} s   "
          f"ratio {helps / numpys:.2f} (target <= 3)")
    got = loaded_by_help()
    print("imported by `quadrat -c help`: " + (", ".join(got) if got else "none of " +
                                               ", ".join(HEAVY)))
    return 0


if __name__ == "__main__":
    sys.exit(main())
