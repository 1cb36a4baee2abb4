"""Content hashes of files and of JSON values (one definition for outputs, resume and caches)."""

from __future__ import annotations

import hashlib
import json
import os
from typing import Any

__all__ = ["file_sha256", "json_sha256"]


def file_sha256(path: str | os.PathLike[str] | None) -> str | None:
    """SHA-256 (hex) of a file's bytes (:func:`hashlib.file_digest`); ``None`` for no file."""
    if path is None:
        return None
    with open(path, "rb") as handle:
        return hashlib.file_digest(handle, "sha256").hexdigest()


def json_sha256(value: Any) -> str:
    """SHA-256 (hex) of the canonical JSON of ``value`` (sorted keys, no NaN)."""
    text = json.dumps(value, sort_keys=True, allow_nan=False, default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()
