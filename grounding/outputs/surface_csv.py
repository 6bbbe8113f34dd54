"""The surface map as CSV: one row per map point with potential, touch and step voltage."""

from __future__ import annotations

import io

import numpy as np

from ..cautions import CAUTIONS
from ..study.result import StudyResult


def surface_csv(r: StudyResult) -> bytes:
    """CSV bytes: `x_m, y_m, potential_v, touch_v, step_v`; touch_v is empty outside the touch area.

    Comment lines starting with '#' carry the case hash and the cautions.
    """
    s = r.surface
    X, Y = np.meshgrid(s.x, s.y)
    buf = io.StringIO()
    buf.write(f"# grounding surface map; case {r.case.source} sha256 {r.case.sha256}\n")
    for c in CAUTIONS:
        buf.write(f"# CAUTION: {c}\n")
    table = io.StringIO()
    np.savetxt(table, np.column_stack([X.ravel(), Y.ravel(), s.potential.ravel(), s.touch.ravel(), s.step.ravel()]),
               fmt=["%.3f", "%.3f", "%.2f", "%.2f", "%.2f"], delimiter=",", header="x_m,y_m,potential_v,touch_v,step_v",
               comments="")
    buf.write(table.getvalue().replace(",nan,", ",,"))
    return buf.getvalue().encode("utf-8")
