"""Reports of processed scans: tidy tables, figure bytes, the self-contained HTML page.

Rendering only (nothing here computes results): :mod:`.tables` (results rows, QC rows, the
methods table after Lin et al. 2021, TOML of the settings), :mod:`.figures` (PNG/PDF bytes and
data URIs) and :mod:`.html` (the report page, every data string escaped).
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
