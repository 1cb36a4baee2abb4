"""Every rendering of specproc: tables, sentences, figures and the self-contained HTML pages.

Rendering only (nothing here computes results): :mod:`.tables` (results rows, QC rows, the
methods table after Lin et al. 2021, significant figures), :mod:`.messages` (flag keys as
sentences), :mod:`.palette` (one colour per member), :mod:`.fit_figure`,
:mod:`.preprocess_figure`, :mod:`.fit_text`, :mod:`.figures` (PNG/PDF bytes and data URIs),
:mod:`.html` (the scan report through Jinja2 templates with autoescaping), :mod:`.cohort`
(the cohort page), :mod:`.phantom` (the phantom report) and :mod:`.svgplot` (inline SVG plots).
"""

from specproc.report.figures import figure_pdf_bytes, figure_png_bytes, png_data_uri
from specproc.report.html import CAUTION_TEXT, escape, render_report, write_report
from specproc.report.tables import config_to_toml, results_rows

__all__ = [
    "CAUTION_TEXT",
    "config_to_toml",
    "escape",
    "figure_pdf_bytes",
    "figure_png_bytes",
    "png_data_uri",
    "render_report",
    "results_rows",
    "write_report",
]
