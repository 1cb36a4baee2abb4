"""Crash-safe file writes: write to a temporary file beside the target, then rename.

A crash or an error never leaves a partial output file under the target name.
:func:`write_folder` does the same for a set of files: all are written into a temporary folder
beside the target folder first, so a full disk or a read-only folder fails before any target
file changes.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from collections.abc import Iterable, Iterator, Mapping
from pathlib import Path

__all__ = ["atomic_path", "write_bytes", "write_folder", "write_text"]


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


def write_folder(folder: str | os.PathLike[str], files: Mapping[str, bytes], *,
                 owned: Iterable[str] = ()) -> dict[str, Path]:
    """Write several files into ``folder`` so that either all of them change or none does.

    The files are written into a temporary folder beside ``folder`` (same file system). A
    missing ``folder`` is then created by renaming the temporary folder; an existing one gets
    each file by a rename (its other files are left alone, except the names in ``owned`` that
    are not written this time, which are removed as stale outputs of an earlier run).

    Parameters
    ----------
    folder : path
        Target folder.
    files : mapping of str to bytes
        File name (no folders) to content.
    owned : iterable of str
        Names this writer owns in ``folder``.

    Returns
    -------
    dict of str to Path
        The target path of each name of ``files``.

    Raises
    ------
    OSError
        When the temporary folder cannot be written (the target folder is then unchanged and
        no temporary folder is left).
    """
    target = Path(folder)
    target.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".partial",
                                    dir=target.parent))
    try:
        os.chmod(staging, 0o777 & ~_UMASK)
        for name, content in files.items():
            path = staging / name
            path.write_bytes(content)
            os.chmod(path, 0o666 & ~_UMASK)
        if not target.exists():
            os.rename(staging, target)
        else:
            for name in files:
                os.replace(staging / name, target / name)
            for name in set(owned) - set(files):
                with contextlib.suppress(FileNotFoundError):
                    (target / name).unlink()
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return {name: target / name for name in files}
