"""Rewrite the stored golden results: ``python -m tests.golden.regenerate [NAME ...]`` (all cases by default).

Commit the rewritten files on their own, with the reason the numbers moved in the commit message.
"""

from __future__ import annotations

import sys
import time

from tests.golden.harness import CASES, golden_document, run_case, write


def main(names: list[str]) -> int:
    unknown = set(names) - {c.name for c in CASES}
    if unknown:
        print(f"unknown golden case(s): {', '.join(sorted(unknown))}; known: {', '.join(c.name for c in CASES)}")
        return 2
    for case in CASES:
        if names and case.name not in names:
            continue
        t0 = time.perf_counter()
        write(case, golden_document(run_case(case)))
        print(f"{case.name}: written ({time.perf_counter() - t0:.1f} s)")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
