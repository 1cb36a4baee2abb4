"""``specproc info FILE...``: what a data file holds, without processing it.

For each file: format, nucleus, spectrometer frequency (MHz), field (T), spectral width (Hz),
dwell time (ms), number of points, each extra dimension with its tag and size, TE, TR and TM
(ms), sequence, protocol, data type and a short digest of the original header (its number of
keys, the first few keys and the first 16 hex digits of the SHA-256 of its canonical JSON:
sorted keys, no spaces). ``--json`` prints one JSON object per file, one per line.

A bad file prints its one-line error ``specproc: error: FILE: ...`` on stderr and the other
files are still shown; the exit status is 2 if any file failed.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import click

from specproc.errors import SpecprocError

if TYPE_CHECKING:
    from specproc.data import Scan

__all__ = ["COMMANDS", "describe_scan", "format_description", "header_digest"]

_DIGEST_KEYS = 5
_DIGEST_HEX = 16


def header_digest(header: Mapping[str, Any]) -> dict[str, Any]:
    """Number of keys, the first keys and a SHA-256 prefix of a header's canonical JSON.

    The canonical JSON has sorted keys and ``(",", ":")`` separators; values JSON cannot hold
    are written with ``str``.
    """
    text = json.dumps(header, sort_keys=True, separators=(",", ":"), default=str,
                      ensure_ascii=False)
    keys = [str(k) for k in header]
    return {
        "n_keys": len(keys),
        "first_keys": keys[:_DIGEST_KEYS],
        "sha256": hashlib.sha256(text.encode("utf-8")).hexdigest()[:_DIGEST_HEX],
    }


def _ms(value_s: float | None) -> float | None:
    return None if value_s is None else value_s * 1e3


def describe_scan(scan: Scan) -> dict[str, Any]:
    """Plain dict shown by ``specproc info`` (times in ms, as at every user edge)."""
    return {
        "file": scan.source,
        "format": scan.format,
        "nucleus": scan.nucleus,
        "spectrometer_mhz": scan.spectrometer_mhz,
        "field_t": scan.field_t,
        "spectral_width_hz": scan.spectral_width_hz,
        "dwell_ms": _ms(scan.dwell_s),
        "n_points": scan.n_points,
        "dims": [
            {"dim": n, "tag": tag, "size": size}
            for n, (tag, size) in enumerate(scan.extra_shape.items(), start=5)
        ],
        "te_ms": _ms(scan.te_s),
        "tr_ms": _ms(scan.tr_s),
        "tm_ms": _ms(scan.tm_s),
        "sequence": scan.sequence,
        "protocol": scan.protocol,
        "centre_ppm": scan.reference_ppm,
        "dtype": str(scan.data.dtype),
        "header": header_digest(scan.header),
    }


def _or_unknown(value: Any, fmt: str = "{}") -> str:
    return "unknown" if value is None else fmt.format(value)


def format_description(info: Mapping[str, Any]) -> str:
    """Human-readable block of lines for one :func:`describe_scan` result."""
    rows = [
        ("format", info["format"]),
        ("nucleus", info["nucleus"]),
        ("spectrometer", f"{info['spectrometer_mhz']:.4f} MHz"),
        ("field", f"{info['field_t']:.3f} T"),
        ("spectral width", f"{info['spectral_width_hz']:.1f} Hz"),
        ("dwell", f"{info['dwell_ms']:.6g} ms"),
        ("points", str(info["n_points"])),
    ]
    if info["dims"]:
        for d in info["dims"]:
            rows.append((f"dim {d['dim']}", f"{d['tag']} x {d['size']}"))
    else:
        rows.append(("extra dims", "none (one FID)"))
    rows += [
        ("TE", _or_unknown(info["te_ms"], "{:.4g} ms")),
        ("TR", _or_unknown(info["tr_ms"], "{:.4g} ms")),
    ]
    if info["tm_ms"] is not None:
        rows.append(("TM", f"{info['tm_ms']:.4g} ms"))
    rows += [
        ("sequence", _or_unknown(info["sequence"])),
        ("protocol", _or_unknown(info["protocol"])),
        ("centre", f"{info['centre_ppm']:.3f} ppm"),
        ("data type", info["dtype"]),
    ]
    digest = info["header"]
    keys = ", ".join(digest["first_keys"])
    more = ", ..." if digest["n_keys"] > len(digest["first_keys"]) else ""
    rows.append(("header", f"{digest['n_keys']} keys ({keys}{more}); sha256 {digest['sha256']}"))
    width = max(len(label) for label, _ in rows)
    lines = [str(info["file"])]
    lines += [f"  {label:<{width}}  {value}" for label, value in rows]
    return "\n".join(lines)


@click.command("info")
@click.argument("files", nargs=-1, required=True, type=click.Path(dir_okay=True))
@click.option("--json", "as_json", is_flag=True, help="One JSON object per file, one per line.")
@click.option("--dwell-ms", type=float, default=None,
              help="Dwell time for files that do not carry it (text, JCAMP-DX), ms.")
@click.option("--spectrometer-mhz", type=float, default=None,
              help="Spectrometer frequency for files that do not carry it, MHz.")
@click.pass_context
def info_command(
    ctx: click.Context,
    files: tuple[str, ...],
    as_json: bool,
    dwell_ms: float | None,
    spectrometer_mhz: float | None,
) -> None:
    """Show what each data FILE holds: format, nucleus, frequency, field, points, dims, TE, TR."""
    from specproc import _json
    from specproc.io import load, reader_notes

    options: dict[str, Any] = {}
    if dwell_ms is not None:
        options["dwell_s"] = dwell_ms * 1e-3
    if spectrometer_mhz is not None:
        options["spectrometer_mhz"] = spectrometer_mhz
    debug = bool(ctx.find_root().params.get("debug"))
    failed = 0
    shown = 0
    for name in files:
        try:
            scan = load(name, **options)
        except SpecprocError as exc:
            if debug:
                raise
            click.echo(f"specproc: error: {exc}", err=True)
            failed += 1
            continue
        info = describe_scan(scan)
        for note in reader_notes(scan):
            click.echo(f"specproc: note: {name}: {note}", err=True)
        if as_json:
            click.echo(_json.dumps(info, ensure_ascii=False, allow_nan=False))
        else:
            if shown:
                click.echo("")
            click.echo(format_description(info))
        shown += 1
    if failed:
        ctx.exit(2)


COMMANDS = [info_command]
