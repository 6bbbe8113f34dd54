"""What every page and section of the review report shares: fonts, paragraph styles, the palette, tables and the
caution box."""

from __future__ import annotations

from pathlib import Path

import matplotlib
from reportlab.lib import colors
from reportlab.lib.enums import TA_LEFT
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.pdfbase import pdfmetrics
from reportlab.pdfbase.ttfonts import TTFont
from reportlab.platypus import (
    Paragraph,
    Table,
    TableStyle,
)

from ...cautions import CAUTIONS
from ..style import volts as style_volts

INK = colors.HexColor("#1c2833")
ACCENT = colors.HexColor("#1f3b73")
WARN = colors.HexColor("#b03a2e")
PALE = colors.HexColor("#eef1f6")
FAIL_BG = colors.HexColor("#f6dcd8")
PASS_BG = colors.HexColor("#dcefe0")


def register_fonts() -> tuple[str, str]:
    """DejaVu Sans (shipped with matplotlib) covers Ω, ρ, ², √ and the other symbols of the report."""
    if "DejaVuSans" not in pdfmetrics.getRegisteredFontNames():
        base = Path(matplotlib.get_data_path()) / "fonts" / "ttf"
        pdfmetrics.registerFont(TTFont("DejaVuSans", str(base / "DejaVuSans.ttf")))
        pdfmetrics.registerFont(TTFont("DejaVuSans-Bold", str(base / "DejaVuSans-Bold.ttf")))
    return "DejaVuSans", "DejaVuSans-Bold"


def styles():
    reg, bold = register_fonts()
    s = {
        "body": ParagraphStyle("body", fontName=reg, fontSize=9, leading=12, textColor=INK, alignment=TA_LEFT),
        "small": ParagraphStyle("small", fontName=reg, fontSize=7.5, leading=9.5, textColor=INK),
        "h1": ParagraphStyle("h1", fontName=bold, fontSize=14, leading=18, textColor=ACCENT, spaceBefore=6,
                             spaceAfter=6),
        "h2": ParagraphStyle("h2", fontName=bold, fontSize=11, leading=14, textColor=ACCENT, spaceBefore=8,
                             spaceAfter=4),
        "title": ParagraphStyle("title", fontName=bold, fontSize=20, leading=25, textColor=INK, spaceAfter=4),
        "subtitle": ParagraphStyle("subtitle", fontName=reg, fontSize=11, leading=15, textColor=INK),
        "caution": ParagraphStyle("caution", fontName=reg, fontSize=9, leading=12, textColor=WARN),
    }
    s["reg"], s["bold"] = reg, bold
    return s


volts = style_volts


def table(rows, widths, st, header=True, verdict_col=None, row_heights=None, font_small=False):
    size = 7.5 if font_small else 8.5
    style = [
        ("FONT", (0, 0), (-1, -1), st["reg"], size),
        ("TEXTCOLOR", (0, 0), (-1, -1), INK),
        ("VALIGN", (0, 0), (-1, -1), "MIDDLE"),
        ("LINEBELOW", (0, 0), (-1, -1), 0.25, colors.HexColor("#c5cbd3")),
        ("TOPPADDING", (0, 0), (-1, -1), 2.5),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 2.5),
    ]
    if header:
        style += [("FONT", (0, 0), (-1, 0), st["bold"], size), ("BACKGROUND", (0, 0), (-1, 0), PALE),
                  ("LINEBELOW", (0, 0), (-1, 0), 0.8, ACCENT)]
    if verdict_col is not None:
        for i, row in enumerate(rows[1:] if header else rows, start=1 if header else 0):
            cell = str(row[verdict_col])
            if cell.startswith("FAIL"):
                style.append(("BACKGROUND", (verdict_col, i), (verdict_col, i), FAIL_BG))
            elif cell.startswith("PASS"):
                style.append(("BACKGROUND", (verdict_col, i), (verdict_col, i), PASS_BG))
    # long text wraps inside its column instead of running past the margin
    cell_style = ParagraphStyle("cell", fontName=st["reg"], fontSize=size, leading=size + 2, textColor=INK)
    rows = [[Paragraph(c, cell_style) if isinstance(c, str) and len(c) * 1.55 * mm > w else c
             for c, w in zip(row, widths)] for row in rows]
    t = Table(rows, colWidths=widths, rowHeights=row_heights, hAlign="LEFT", repeatRows=1 if header else 0)
    t.setStyle(TableStyle(style))
    return t


def caution_box(st):
    paras = [Paragraph("<b>CAUTION</b>", st["caution"])] + [Paragraph("• " + c, st["caution"]) for c in CAUTIONS]
    t = Table([[p] for p in paras], colWidths=[170 * mm])
    t.setStyle(TableStyle([("BOX", (0, 0), (-1, -1), 1.2, WARN), ("BACKGROUND", (0, 0), (-1, -1),
                                                                      colors.HexColor("#fdf2f0")),
                           ("TOPPADDING", (0, 0), (-1, -1), 2), ("BOTTOMPADDING", (0, 0), (-1, -1), 2),
                           ("LEFTPADDING", (0, 0), (-1, -1), 6)]))
    return t


def plus_minus(u: float) -> str:
    """A relative 1-σ as ±x %, or 'unresolved' where the readings do not resolve the parameter (as the terminal)."""
    return "unresolved" if not u < 1.0 else f"±{u * 100:.0f}%"


def verdict_word(ok):
    return "n/a" if ok is None else ("PASS" if ok else "FAIL")


def margin(value, limit):
    return "" if limit is None else f"{(limit - value) / limit * 100:+.0f} %"

