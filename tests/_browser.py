"""Headless Chromium for the page tests: the DOM a real browser builds from a page, its tables.

Chromium is the Debian package ``chromium`` (``.ci/run`` installs it); a test skips with that
name when it is missing.
"""

from __future__ import annotations

import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import pytest


def chromium() -> str:
    """Path of the Chromium binary (skips the test when there is none)."""
    for name in ("chromium", "chromium-browser", "/usr/bin/chromium"):
        found = shutil.which(name)
        if found:
            return found
    pytest.skip("Chromium is not installed (Debian package 'chromium'); the browser check "
                "needs it")


def _flags(profile: Path) -> list[str]:
    return ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
            "--disable-component-update", "--disable-sync", "--no-first-run",
            f"--user-data-dir={profile}"]


def dump_dom(page: Path, profile: Path) -> str:
    """The document as Chromium serialises it after parsing and layout (``--dump-dom``)."""
    done = subprocess.run([chromium(), *_flags(profile), "--dump-dom", page.resolve().as_uri()],
                          capture_output=True, timeout=120, check=False)
    assert done.returncode == 0 and done.stdout, done.stderr.decode("utf-8", "replace")[-2000:]
    return done.stdout.decode("utf-8")


def screenshot(page: Path, shot: Path, profile: Path, size: str = "1200,1600") -> Path:
    """A PNG screenshot of the page."""
    done = subprocess.run([chromium(), *_flags(profile), f"--screenshot={shot}",
                           f"--window-size={size}", page.resolve().as_uri()],
                          capture_output=True, timeout=120, check=False)
    assert shot.is_file(), done.stderr.decode("utf-8", "replace")[-2000:]
    return shot


class _Tables(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.tables: dict[str, list[list[str]]] = {}
        self._id: str | None = None
        self._row: list[str] | None = None
        self._cell: list[str] | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag == "table":
            self._id = dict(attrs).get("id") or f"table-{len(self.tables)}"
            self.tables[self._id] = []
        elif tag == "tr" and self._id is not None:
            self._row = []
        elif tag in ("td", "th") and self._row is not None:
            self._cell = []

    def handle_endtag(self, tag: str) -> None:
        if tag in ("td", "th") and self._row is not None and self._cell is not None:
            self._row.append(" ".join("".join(self._cell).split()))
            self._cell = None
        elif tag == "tr" and self._row is not None and self._id is not None:
            self.tables[self._id].append(self._row)
            self._row = None
        elif tag == "table":
            self._id = None

    def handle_data(self, data: str) -> None:
        if self._cell is not None:
            self._cell.append(data)


def tables(html: str) -> dict[str, list[list[str]]]:
    """Every table of a document by its id: rows of cell texts (the heading row first)."""
    parser = _Tables()
    parser.feed(html)
    parser.close()
    return parser.tables
