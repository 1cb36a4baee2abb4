"""Crash-safe file writes: write to a temporary file beside the target, then rename.

A crash or an error never leaves a partial output file under the target name.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

__all__ = ["atomic_path", "write_bytes", "write_text"]


def _read_umask() -> int:
    # os.umask can only be read by setting it; done once, at import, not while threads write
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


_UMASK = _read_umask()


def _suffixes(path: Path) -> str:
    return "".join(path.suffixes[-2:]) if path.name.endswith(".gz") else path.suffix


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield a temporary path in the target's folder; rename it to ``path`` on success.

    The temporary name keeps the target's suffixes (``.nii.gz`` stays ``.nii.gz``) so that
    libraries choosing a format by suffix write the right thing. On an exception the
    temporary file is removed and the target is left as it was.
    """
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp_name = tempfile.mkstemp(
        prefix=f".{target.name}.", suffix=f".tmp{_suffixes(target)}", dir=target.parent
    )
    os.close(fd)
    tmp = Path(tmp_name)
    # mkstemp creates owner-only files; give the output the usual permissions of the umask.
    os.chmod(tmp, 0o666 & ~_UMASK)
    try:
        yield tmp
        os.replace(tmp, target)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
        raise


def write_bytes(path: str | os.PathLike[str], content: bytes) -> None:
    """Write ``content`` to ``path`` atomically."""
    with atomic_path(path) as tmp:
        tmp.write_bytes(content)


def write_text(path: str | os.PathLike[str], text: str) -> None:
    """Write UTF-8 ``text`` to ``path`` atomically."""
    write_bytes(path, text.encode("utf-8"))
