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

__all__ = ["atomic_write_text", "write_json", "write_csv", "save_figure", "json_ready"]


def _publish(tmp: str, path: Path) -> None:
    """Give the temporary file the usual permissions (mkstemp makes it 0600) and rename it."""
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    os.replace(tmp, path)


def atomic_write_text(path: str | Path, text: str) -> Path:
    """Write ``text`` to ``path`` via a temporary file in the same folder and a rename."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as f:
            f.write(text)
        _publish(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


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
    return atomic_write_text(path, json.dumps(json_ready(data), indent=2) + "\n")


def write_csv(path: str | Path, header: list[str], rows: Iterable[Iterable[Any]]) -> Path:
    buf = io.StringIO()
    writer = csv.writer(buf)
    writer.writerow(header)
    for row in rows:
        writer.writerow(["" if v is None else v for v in row])
    return atomic_write_text(path, buf.getvalue())


def save_figure(fig, path: str | Path, *, dpi: int = 130) -> Path:
    """Save a matplotlib figure atomically as PNG and close it."""
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
