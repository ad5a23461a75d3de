"""Benchmark: ``compquant --help`` against a bare ``python -c "import click"`` (issue 22, goal <= 3x).

Usage::

    /work/venv/bin/python benchmarks/cli_startup.py [--repeat 7]

Each command runs as a fresh subprocess ``--repeat`` times, interleaved (click, --help, click, ...)
so both see the same machine load; the figure is the ratio of the medians of the wall times, with
the medians of the child CPU times (``resource.getrusage(RUSAGE_CHILDREN)``) beside it.  Also
prints the five slowest imports of ``--help`` (``python -X importtime``) to show where its time goes.
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
CLICK = [sys.executable, "-c", "import click"]
HELP = [sys.executable, "-m", "compquant", "--help"]


def _env() -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    return env


def _time(cmd: list[str], env: dict) -> tuple[float, float]:
    """(wall s, child CPU s) of one run of ``cmd``."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    subprocess.run(cmd, env=env, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def slowest_imports(env: dict, n: int = 5) -> list[tuple[int, str]]:
    """The ``n`` largest cumulative import times (µs) of ``compquant --help``."""
    p = subprocess.run([sys.executable, "-X", "importtime", *HELP[1:]], env=env, capture_output=True, text=True)
    rows = []
    for line in p.stderr.splitlines():
        if not line.startswith("import time:") or "cumulative" in line:
            continue
        parts = line.split("|")
        rows.append((int(parts[1]), parts[2].rstrip()))
    top = [r for r in rows if r[1].strip().startswith(("compquant", "numpy", "pandas", "click", "scipy", "h5py"))]
    return sorted(top, reverse=True)[:n]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--repeat", type=int, default=7)
    a = ap.parse_args(argv)
    env = _env()
    _time(HELP, env)  # warm the file cache (bytecode, shared libraries)
    _time(CLICK, env)
    click_w, click_c, help_w, help_c = [], [], [], []
    for _ in range(a.repeat):
        w, c = _time(CLICK, env)
        click_w.append(w)
        click_c.append(c)
        w, c = _time(HELP, env)
        help_w.append(w)
        help_c.append(c)
    mw = statistics.median
    print(f"load average {os.getloadavg()[0]:.1f}; {a.repeat} runs each, medians")
    print(f"  import click      wall {mw(click_w) * 1e3:7.1f} ms  CPU {mw(click_c) * 1e3:7.1f} ms")
    print(f"  compquant --help  wall {mw(help_w) * 1e3:7.1f} ms  CPU {mw(help_c) * 1e3:7.1f} ms")
    ratio_w, ratio_c = mw(help_w) / mw(click_w), mw(help_c) / mw(click_c)
    print(f"ratio --help / import click: wall {ratio_w:.2f}x, CPU {ratio_c:.2f}x "
          f"(goal <= 3x: {'met' if ratio_w <= 3 else 'missed'})")
    print("slowest imports of --help (cumulative µs):")
    for us, name in slowest_imports(env):
        print(f"  {us:>9,}  {name}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
