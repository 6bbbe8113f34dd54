"""Benchmark: a whole study as a user runs it (cold, one process each), on the invented collector yard of
``benchmarks/yard.py``; ratios measured in one run (the machines are noisy).

Targets (issue: fast studies):
- the full study (fitted 3-layer soil and its uncertainty, fence, remote pipe, four scenarios, two standards)
  cold ≤ 4 × the plain study of the same grid (no scenarios, no separate metal, soil written out);
- a re-run after changing only the rock resistivity ≤ 0.15 × the cold full study (solves kept between runs);
- results identical with ``--no-cache`` (checked here on the summary).

Run: python benchmarks/bench_study.py [--folder DIR]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from yard import write_yard  # noqa: E402


def timed(args: list[str], env: dict) -> tuple[float, float]:
    """Wall time (s) and peak resident memory (MB) of one command-line run."""
    t0 = time.perf_counter()
    child = subprocess.run([sys.executable, "-c", "import resource, runpy, sys; sys.argv = ['grounding'] + sys.argv[1:];"
                            "\ntry:\n    runpy.run_module('grounding.cli', run_name='__main__')\nexcept SystemExit as e:\n"
                            "    code = e.code\nelse:\n    code = 0\n"
                            "print('PEAK', resource.getrusage(resource.RUSAGE_SELF).ru_maxrss, file=sys.stderr)\n"
                            "sys.exit(code)", *args], capture_output=True, text=True, env=env)
    seconds = time.perf_counter() - t0
    if child.returncode != 0:
        raise SystemExit(f"{' '.join(args)} failed:\n{child.stderr}")
    peak = next(float(line.split()[1]) / 1024 for line in child.stderr.splitlines() if line.startswith("PEAK"))
    return seconds, peak


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--folder", default=None)
    folder = Path(parser.parse_args().folder or tempfile.mkdtemp(prefix="yard-"))
    full, plain = write_yard(folder), write_yard(folder, plain=True)
    rock = write_yard(folder, rock=2500.0, name="yard-rock.yaml")
    env = {**os.environ, "GROUNDING_CACHE_DIR": str(folder / "cache")}
    subprocess.run([sys.executable, "-m", "grounding.cli", "cache", "clear"], env=env, capture_output=True)
    rows = {}
    rows["plain"] = timed(["study", str(plain), "--quiet", "--no-cache"], env)
    rows["full cold"] = timed(["study", str(full), "--quiet", "--json", str(folder / "cold.json")], env)
    rows["rock edited"] = timed(["study", str(rock), "--quiet", "--json", str(folder / "rock.json")], env)
    rows["full --no-cache"] = timed(["study", str(full), "--quiet", "--no-cache", "--json", str(folder / "nc.json")], env)
    for name, (s, mb) in rows.items():
        print(f"{name:<18}{s:8.1f} s {mb:8.0f} MB")
    cold = rows["full cold"][0]
    print(f"full / plain      {cold / rows['plain'][0]:6.2f}   (target ≤ 4)")
    print(f"rock / full       {rows['rock edited'][0] / cold:6.3f}   (target ≤ 0.15)")
    same = json.loads((folder / "cold.json").read_text())["summary"] == json.loads((folder / "nc.json").read_text())["summary"]
    print(f"--no-cache gives the same summary: {same}")
    solve = json.loads((folder / "rock.json").read_text())["diagnostics"]["solve"]["text"]
    print(f"rock edited: {solve}")


if __name__ == "__main__":
    main()
