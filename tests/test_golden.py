"""Golden results: every demo case and each feature case gives the stored numbers again.

The stored files (tests/golden/results/) were computed by this tool itself (a regression net, not an
external check): a layout or speed change must not move them beyond the stated tolerance; a change that
moves them on purpose regenerates them in a commit of its own (``python -m tests.golden.regenerate``).
"""

from __future__ import annotations

import pytest

from tests.golden.harness import CASES, differences, golden_document, read, run_case

#: Golden cases that take more than about 10 s (left out of the quick loop, ``-m "not slow"``).
SLOW = {"seasons"}


@pytest.mark.parametrize("case", [pytest.param(c, marks=pytest.mark.slow) if c.name in SLOW else c for c in CASES],
                         ids=[c.name for c in CASES])
def test_study_gives_the_stored_results(case):
    fresh = golden_document(run_case(case))
    diff = differences(read(case), fresh, case.rtol)
    assert not diff, f"{len(diff)} difference(s) from tests/golden/results/{case.name}.json:\n" + "\n".join(diff[:30])


def test_the_comparison_sees_a_change_in_any_number():
    stored = {"a": [1.0, {"b": 2.0, "c": "text"}], "d": True, "e": None}
    assert differences(stored, stored, 1e-9) == []
    assert differences(stored, {"a": [1.0, {"b": 2.0 * (1 + 1e-8), "c": "text"}], "d": True, "e": None}, 1e-9)
    assert differences(stored, {"a": [1.0, {"b": 2.0, "c": "other"}], "d": True, "e": None}, 1e-9)
    assert differences(stored, {"a": [1.0], "d": True, "e": None}, 1e-9)
    assert differences(stored, {"a": [1.0, {"b": 2.0, "c": "text"}], "d": False, "e": None}, 1e-9)
    assert differences(stored, {"a": [1.0, {"b": 2.0, "c": "text"}], "d": True}, 1e-9)
