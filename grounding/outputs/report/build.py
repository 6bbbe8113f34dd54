"""The review report: a self-contained PDF a licensed reviewer can check line by line.

Sections: cover (identity, verdicts, cautions), inputs, plan, results, figures, method and assumptions as they
ran, with a live validation table, and a reviewer block. The cautions' own text stands in the footer of every
page. The PDF is built in memory and written atomically; with the same case and date it is byte-for-byte
reproducible.
"""

from __future__ import annotations

import datetime as _dt
import io

from reportlab.lib.pagesizes import A4
from reportlab.lib.units import mm
from reportlab.lib.utils import simpleSplit
from reportlab.platypus import BaseDocTemplate, Frame, Image, PageTemplate, Paragraph

from ...cautions import CAUTIONS
from ...study.result import StudyResult
from ...version import __version__
from ..figures import all_figures, png_bytes
from .common import ACCENT, WARN, styles
from .sections import SECTIONS, Context

#: Footer font size, pt, and the distance between its lines, mm.
FOOTER_SIZE = 6.4
FOOTER_LEADING = 2.7


def footer_lines(text_width: float, font: str, stamp: str) -> list[str]:
    """The cautions' own text wrapped to the page width, then the case stamp."""
    text = "CAUTION: " + " ".join(CAUTIONS)
    return simpleSplit(text, font, FOOTER_SIZE, text_width) + [stamp]


def build_report(r: StudyResult, date: str | None = None) -> bytes:
    """The review report as PDF bytes.

    Parameters
    ----------
    r : StudyResult
        A finished study.
    date : str, optional
        Report date (ISO); default today (UTC). The only content that changes between runs.
    """
    st = styles()
    date = date or _dt.datetime.now(_dt.timezone.utc).date().isoformat()
    c = r.case
    buf = io.BytesIO()
    w, h = A4
    stamp = f"Case SHA-256 {c.sha256[:16]}… · grounding {__version__} · {date}"
    footer = footer_lines(w - 36 * mm, st["reg"], stamp)
    footer_top = 6 * mm + len(footer) * FOOTER_LEADING * mm

    def decorate(canvas, doc):
        canvas.saveState()
        # metadata: creation date = the study date on the cover (still byte-identical for the same date),
        # the tool and its version as producer
        pdf_date = "D:" + date.replace("-", "")[:8].ljust(8, "0") + "000000+00'00'"
        canvas._doc.info._dateFormatter = lambda *args: pdf_date
        canvas._doc.info.producer = f"grounding {__version__}"
        canvas.setStrokeColor(ACCENT)
        canvas.setLineWidth(1.5)
        canvas.line(18 * mm, h - 14 * mm, w - 18 * mm, h - 14 * mm)
        canvas.setFont(st["bold"], 8)
        canvas.setFillColor(ACCENT)
        canvas.drawString(18 * mm, h - 12 * mm, "EARTHING GRID STUDY · REVIEW COPY")
        canvas.setFont(st["reg"], 8)
        left = canvas.stringWidth("EARTHING GRID STUDY · REVIEW COPY", st["bold"], 8) + 6 * mm
        title, tail = c.title, f" · page {doc.page}"
        while title and canvas.stringWidth(title + tail, st["reg"], 8) > w - 36 * mm - left:
            title = title[:-2].rstrip() + "…"                 # shortened to leave the left label clear
        canvas.drawRightString(w - 18 * mm, h - 12 * mm, title + tail)
        canvas.setStrokeColor(WARN)
        canvas.setLineWidth(0.8)
        canvas.line(18 * mm, footer_top + 1.5 * mm, w - 18 * mm, footer_top + 1.5 * mm)
        canvas.setFillColor(WARN)
        canvas.setFont(st["reg"], FOOTER_SIZE)
        for k, line in enumerate(footer):
            canvas.drawString(18 * mm, footer_top - (k + 1) * FOOTER_LEADING * mm, line)
        canvas.restoreState()

    doc = BaseDocTemplate(buf, pagesize=A4, leftMargin=20 * mm, rightMargin=20 * mm, topMargin=20 * mm,
                          bottomMargin=footer_top + 5 * mm, title=f"Earthing grid study: {c.title}", author="",
                          subject="Earthing grid study for review", creator=f"grounding {__version__}",
                          invariant=1)
    frame = Frame(doc.leftMargin, doc.bottomMargin, doc.width, doc.height, id="body")
    doc.addPageTemplates([PageTemplate(id="page", frames=[frame], onPage=decorate)])
    figs = {fig.name: fig for fig in all_figures(r)}

    def image(name, width=165 * mm):
        fig = figs[name].figure
        wi, hi = fig.get_size_inches()
        return Image(io.BytesIO(png_bytes(fig)), width=width, height=width * hi / wi)

    ctx = Context(r, st, lambda text, style="body": Paragraph(text, st[style]), image, lambda name: name in figs, date)
    story = []
    for section in SECTIONS:
        story += section(ctx)
    doc.build(story)
    return buf.getvalue()
