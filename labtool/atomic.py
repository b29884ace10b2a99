"""Output files (reports, exports, calibrated designs) are written whole or not at all: to a temporary
name beside the target, then renamed. (The campaign store has its own protocol under its write lock.)"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Callable

from labtool.errors import UsageError


def write_atomic(path: Path, write: Callable[[Path], object], what: str = "file") -> Path:
    """``write(tmp)`` fills a temporary file that then replaces ``path``; nothing partial is left on failure."""
    tmp = path.with_name(f".{path.name}.{os.getpid()}.part")
    try:
        write(tmp)
        os.replace(tmp, path)
    except OSError as exc:
        raise UsageError(f"{path}: cannot write the {what} ({exc.strerror or exc})") from None
    finally:
        tmp.unlink(missing_ok=True)  # gone already after the rename; a failed write leaves nothing
    return path
