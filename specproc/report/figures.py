"""Figure bytes for reports: PNG and PDF renderings of matplotlib figures, data URIs.

The figures themselves are drawn by their modules (:func:`specproc.fit.plot_fit`,
:func:`specproc.preprocess.figure.render_preprocess_figure`); this module only turns them into
bytes (matplotlib's Agg and PDF backends, no display needed) and into ``data:`` URIs for a
self-contained HTML page.
"""

from __future__ import annotations

import base64
import io
import os
from typing import Any

from specproc._atomic import write_bytes

__all__ = ["PNG_COMPRESS_LEVEL", "figure_pdf_bytes", "figure_png_bytes", "plain_text",
           "png_data_uri", "save_figure_pdf"]


def plain_text(text: str) -> str:
    """``text`` as matplotlib shows it literally: ``$`` escaped (no mathtext), characters that
    cannot be encoded (file names that are not valid UTF-8) as ``?``."""
    safe = str(text).encode("utf-8", "replace").decode("utf-8")
    return safe.replace("$", r"\$")


#: zlib level of the PNG files: 3 of 9 encodes about a third faster than Pillow's default 6
#: (a tenth of the cost of a figure), for files a few per cent larger; the pixels are the same.
PNG_COMPRESS_LEVEL = 3


def figure_png_bytes(fig: Any, *, dpi: int = 110) -> bytes:
    """PNG image of a matplotlib figure (Agg), zlib level :data:`PNG_COMPRESS_LEVEL`."""
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=dpi,
                pil_kwargs={"compress_level": PNG_COMPRESS_LEVEL})
    return buffer.getvalue()


def figure_pdf_bytes(fig: Any) -> bytes:
    """PDF document (one page, vector graphics) of a matplotlib figure.

    The creation date is left out of the document's metadata so that the same figure gives
    the same bytes.
    """
    buffer = io.BytesIO()
    fig.savefig(buffer, format="pdf", metadata={"Creator": "specproc", "CreationDate": None})
    return buffer.getvalue()


def save_figure_pdf(fig: Any, path: str | os.PathLike[str]) -> None:
    """Write :func:`figure_pdf_bytes` to ``path`` atomically."""
    write_bytes(path, figure_pdf_bytes(fig))


def png_data_uri(png: bytes) -> str:
    """``data:image/png;base64,...`` URI of PNG bytes (for an ``<img src>``).

    Raises
    ------
    ValueError
        When the bytes do not start with the PNG signature.
    """
    if not png.startswith(b"\x89PNG\r\n\x1a\n"):
        raise ValueError("not a PNG image")
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")
