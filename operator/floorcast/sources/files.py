"""Series from and to local files: the file system half of what ``core.series_text`` parses.

Errors name the path exactly as the user typed it, so the one-line CLI message points
at the file they need to fix.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path
from typing import Any

from floorcast.core.series import Series
from floorcast.core.series_text import parse_forecast, parse_history, to_csv_text, to_json_text
from floorcast.errors import InputError

_WRITERS = {".csv": to_csv_text, ".json": to_json_text}


def read_text(path: str | os.PathLike[str], *, max_bytes: int | None = None) -> str:
    """UTF-8 text of ``path``; a size limit is checked before reading, so an oversized
    file costs nothing to refuse."""
    p, name = Path(path), str(path)
    try:
        if max_bytes is not None and (size := p.stat().st_size) > max_bytes:
            raise InputError(
                f"file is {size} bytes, over the limit of {max_bytes} bytes "
                f"({max_bytes / 2**20:g} MiB)",
                source=name,
            )
        data = p.read_bytes()
    except FileNotFoundError:
        raise InputError("file not found", source=name) from None
    except IsADirectoryError:
        raise InputError("is a directory, not a file", source=name) from None
    except PermissionError:
        raise InputError("permission denied", source=name) from None
    except OSError as e:
        raise InputError(f"cannot read file: {e.strerror or e}", source=name) from None
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as e:
        raise InputError(f"not UTF-8 text (bad byte at offset {e.start})", source=name) from None


def read_history(path: str | os.PathLike[str], **kw: Any) -> Series:
    """Recorded load; ``kw`` are ``parse_history``'s options (``max_gap``, ``gap_fill``, ...)."""
    text = read_text(path, max_bytes=kw.get("max_bytes"))
    return parse_history(text, source=str(path), **kw)


def read_forecast(path: str | os.PathLike[str], **kw: Any) -> Series:
    """A stored forecast; ``kw`` are ``parse_forecast``'s options."""
    text = read_text(path, max_bytes=kw.get("max_bytes"))
    return parse_forecast(text, source=str(path), **kw)


def write_forecast(series: Series, path: str | os.PathLike[str]) -> None:
    """Write by suffix (``.csv`` or ``.json``). The file is replaced atomically, so a
    reader polling it never sees half a forecast."""
    p, name = Path(path), str(path)
    writer = _WRITERS.get(p.suffix.lower())
    if writer is None:
        raise InputError(
            f"unknown output format {p.suffix or '(no suffix)'!r}; use a .csv or .json file name",
            source=name,
        )
    text = writer(series)
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.", suffix=".tmp", dir=p.parent)
    except FileNotFoundError:
        raise InputError(f"directory {str(p.parent)!r} does not exist", source=name) from None
    except OSError as e:
        raise InputError(f"cannot write file: {e.strerror or e}", source=name) from None
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as f:
            f.write(text)
        os.chmod(tmp, 0o644)  # mkstemp's 0600 would hide the file from other readers
        os.replace(tmp, p)
    except OSError as e:
        Path(tmp).unlink(missing_ok=True)
        raise InputError(f"cannot write file: {e.strerror or e}", source=name) from None
