"""Writing results: every file goes to a temporary name first and is renamed into place."""

from __future__ import annotations

import csv
import io
import json
import math
import os
import tempfile
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from wellwright.physics.errors import InputError

__all__ = [
    "atomic_write",
    "atomic_write_text",
    "write_json",
    "write_csv",
    "save_figure",
    "json_ready",
    "check_output_folder",
    "remove_temporaries",
]

#: Names of this module's temporary files: ``.NAME.XXXX.tmp`` and ``.STEM.XXXX.png``.
_TEMPORARY = (".*.tmp", ".*.png")


def _publish(tmp: str, path: Path) -> None:
    """Give the temporary file the usual permissions (mkstemp makes it 0600) and rename it."""
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    os.replace(tmp, path)


def atomic_write(path: str | Path, data: str | bytes) -> Path:
    """Write ``data`` (text as UTF-8) to ``path`` via a temporary file in the same folder
    and a rename: the one atomic writer; a reader sees the old file or the new one.

    Parameters
    ----------
    path
        File to write (a missing folder is made).
    data
        Contents: text (written as UTF-8) or bytes.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as f:
            f.write(data.encode("utf-8") if isinstance(data, str) else data)
        _publish(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def atomic_write_text(path: str | Path, text: str) -> Path:
    """Write ``text`` to ``path`` atomically (:func:`atomic_write`).

    Parameters
    ----------
    path
        File to write (a missing folder is made).
    text
        Contents, written as UTF-8.
    """
    return atomic_write(path, text)


def json_ready(value: Any) -> Any:
    """Plain JSON types: numpy scalars and arrays converted, NaN and inf as ``None``."""
    if isinstance(value, dict):
        return {str(k): json_ready(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_ready(v) for v in value]
    if hasattr(value, "tolist"):
        return json_ready(value.tolist())
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def write_json(path: str | Path, data: Any) -> Path:
    """Write ``data`` as indented JSON to ``path`` atomically.

    Parameters
    ----------
    path
        File to write (a missing folder is made).
    data
        JSON-like data; numpy values become plain, NaN and inf ``None`` (:func:`json_ready`).
    """
    return atomic_write_text(path, json.dumps(json_ready(data), indent=2) + "\n")


def write_csv(path: str | Path, header: list[str], rows: Iterable[Iterable[Any]]) -> Path:
    """Write a CSV file atomically: ``header``, then ``rows`` (``None`` as an empty cell).

    Parameters
    ----------
    path
        File to write (a missing folder is made).
    header
        Column names.
    rows
        One iterable of values per row, in the header's order.
    """
    buf = io.StringIO()
    writer = csv.writer(buf)
    writer.writerow(header)
    for row in rows:
        writer.writerow(["" if v is None else v for v in row])
    return atomic_write_text(path, buf.getvalue())


def save_figure(fig, path: str | Path, *, dpi: int = 130) -> Path:
    """Save a matplotlib figure atomically as PNG and close it.

    Parameters
    ----------
    fig
        A matplotlib figure.
    path
        PNG file to write (a missing folder is made).
    dpi
        Resolution, dots per inch.
    """
    import matplotlib.pyplot as plt

    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=".png", dir=path.parent)
    os.close(fd)
    try:
        fig.savefig(tmp, dpi=dpi, bbox_inches="tight")
        _publish(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    finally:
        plt.close(fig)
    return path


def check_output_folder(path: str | Path, *, key: str = "--out") -> Path:
    """Raise :class:`InputError` unless ``path`` is, or can be made, a writable folder.

    Checked before a command writes anything: ``path`` must not be a file, nor lie
    under a file, and the folder (or its nearest existing parent) must be writable
    (a read-only folder or file system).

    Parameters
    ----------
    path
        The output folder.
    key
        Name of the option or key that gave it, for the message.
    """
    path = Path(path)
    if path.exists() and not path.is_dir():
        raise InputError("exists and is not a folder", source=str(path), key=key)
    existing = path
    while not existing.exists():
        existing = existing.parent
    if not existing.is_dir():
        raise InputError(
            f"{str(existing)!r} is a file, so no folder can be made under it",
            source=str(path),
            key=key,
        )
    if not os.access(existing, os.W_OK | os.X_OK):
        raise InputError(f"{str(existing)!r} is not writable", source=str(path), key=key)
    return path


def remove_temporaries(folder: str | Path) -> int:
    """Delete the temporary files an interrupted write left in ``folder`` and below.

    Only this module's temporary names (hidden, ``.tmp`` or ``.png``) are touched;
    returns how many were removed.
    """
    folder = Path(folder)
    if not folder.is_dir():
        return 0
    removed = 0
    for pattern in _TEMPORARY:
        for tmp in folder.rglob(pattern):
            if tmp.is_file() and tmp.name.count(".") >= 3:  # .NAME.XXXX.ext: never a user file
                tmp.unlink(missing_ok=True)
                removed += 1
    return removed
