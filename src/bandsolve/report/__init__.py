"""Figures and the self-contained HTML report of a calibration.

* :mod:`bandsolve.report.figures`: matplotlib figures (headless) from plain arrays.
* :func:`write_report`: one HTML file with the model definition, data summary, figures of
  merit, validation and comparison results, a prediction batch, the flags legend and the
  cautions; figures inline, no network requests, printable.
"""

from __future__ import annotations

from bandsolve.report.html import SECTION_IDS, render_report, write_report

__all__ = ["SECTION_IDS", "render_report", "write_report"]
