"""Time to load the shipped atomic database (issue 15 goal: under 0.3 s), against a baseline.

Baseline, measured in the same run: pandas reading the same compressed CSV with no further work.
Each figure is the median of 5 loads with the in-process caches cleared (compquant.atomic._cache
holds no disk cache).  Run:
``python benchmarks/atomic_load.py``.
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from compquant.atomic import _cache
from compquant.atomic import lines as lines_mod
from compquant.atomic import partition as part_mod
from compquant.atomic.elements import _data_dir


def _clear():
    _cache._MEMO.clear()
    lines_mod._shipped_all.cache_clear()
    lines_mod._shipped_lines.cache_clear()
    part_mod.partition_index.cache_clear()
    part_mod.level_index.cache_clear()
    part_mod._all_levels.cache_clear()
    part_mod._all_tabulated.cache_clear()
    part_mod._shipped_levels.cache_clear()
    part_mod._shipped_arrays.cache_clear()


def _median(fn, n=5):
    out = []
    for _ in range(n):
        _clear()
        t0 = time.perf_counter()
        fn()
        out.append(time.perf_counter() - t0)
    return statistics.median(out)


def main():
    import compquant.atomic as atomic

    path = _data_dir() / "lines.csv.gz"
    base = _median(lambda: pd.read_csv(path))
    lines = _median(lambda: atomic.load_line_list())
    every = _median(lambda: atomic.load_line_list(stages=(1, 2, 3)))

    def pf():
        for sp in ("Fe I", "Fe II", "Cu I", "Cu II", "W I", "Mo II"):
            atomic.partition_function(sp, 10000.0)

    pfs = _median(pf)
    atomic.load_line_list()
    t0 = time.perf_counter()
    atomic.load_line_list()
    cached = time.perf_counter() - t0
    n = len(atomic.load_line_list(stages=(1, 2, 3)))
    print(f"baseline: pandas read of lines.csv.gz ({n} rows)  {base * 1000:7.1f} ms")
    print(f"load_line_list() stages I-II, cold                {lines * 1000:7.1f} ms  ({lines / base:.2f} x baseline)")
    print(f"load_line_list(stages=(1, 2, 3)), cold            {every * 1000:7.1f} ms  ({every / base:.2f} x baseline)")
    print(f"load_line_list() again (cached, a copy)           {cached * 1000:7.1f} ms  "
          f"({cached / base:.2f} x baseline)")
    print(f"partition functions of 6 species, cold            {pfs * 1000:7.1f} ms  ({pfs / base:.2f} x baseline)")
    print(f"goal: under 300 ms cold -> {'met' if lines + pfs < 0.3 else 'missed'} ({(lines + pfs) * 1000:.0f} ms)")


if __name__ == "__main__":
    main()
