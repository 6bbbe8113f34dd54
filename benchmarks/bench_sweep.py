"""Benchmark: 50 layout options on 2 worker processes against 1, speed-up printed.

Every option has its own geometry (no shared solves), so the speed-up measures the process pool.
Run: python benchmarks/bench_sweep.py
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

from grounding.options.runner import run_options
from grounding.options.sweep import load_variants

CASE = """\
format: 1
soil: {resistivity: 200}
surface_layer: {resistivity: 3000, thickness: 0.1}
fault: {current: 4000, split_factor: 0.5, clearing_time: 0.3}
electrodes:
  grids: [{origin: [0, 0], size: [40, 30], meshes: [4, 3], depth: 0.6, diameter: 0.0113}]
  rods: [{top: [0, 0, 0.6], length: 3, diameter: 0.016}]
discretization: {max_segment: 1.5}
surface: {margin: 3, resolution: 1.0}
sweep:
  grid.spacing: [10, 8, 6, 5, 4]
  rods.length: {from: 2, to: 6.5, step: 0.5}
  rods.layout: [perimeter]
"""


def main():
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "bench.yaml"
        path.write_text(CASE)
        cases = [v.case for v in load_variants(path)]
    t = time.perf_counter()
    one = run_options(cases, workers=1, estimate_error=False)
    t1 = time.perf_counter() - t
    t = time.perf_counter()
    two = run_options(cases, workers=2, estimate_error=False)
    t2 = time.perf_counter() - t
    same = all(a.grid_resistance == b.grid_resistance and a.surface.max_touch.value == b.surface.max_touch.value
               for a, b in zip(one, two))
    print(f"{len(cases)} options: 1 worker {t1:.1f} s, 2 workers {t2:.1f} s, speed-up {t1 / t2:.2f}×; "
          f"results identical: {same}")


if __name__ == "__main__":
    main()
