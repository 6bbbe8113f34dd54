"""The review report (PDF): one function per section, a shared style, the page frame with the cautions."""

from .build import build_report

__all__ = ["build_report"]
