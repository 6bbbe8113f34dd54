"""Shared helpers: small cases written as YAML text, run through the real loader."""

from __future__ import annotations

import os
import tempfile
import textwrap

import pytest

from grounding.case.load import parse_case

# solves kept between runs go to a folder of this test process (and the command-line runs it starts), never the
# user's own cache
os.environ["GROUNDING_CACHE_DIR"] = tempfile.mkdtemp(prefix="grounding-test-cache-")


def case_text(electrodes: str, soil: str = "{resistivity: 100}", extra: str = "", fault: str | None = None) -> str:
    """A complete case file around the given ``electrodes`` block (YAML flow or block text)."""
    fault = fault or "{current: 1000, clearing_time: 0.5}"
    return textwrap.dedent(f"""\
        format: 1
        title: test
        soil: {soil}
        fault: {fault}
        electrodes:
        """) + textwrap.indent(textwrap.dedent(electrodes), "  ") + textwrap.dedent(extra)


@pytest.fixture
def make_case():
    def _make(electrodes: str, **kw):
        return parse_case(case_text(electrodes, **kw), file="test.yaml")
    return _make
