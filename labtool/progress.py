"""Progress bars for long work: shown on a terminal, silent otherwise (logs, CI, pipes)."""

from __future__ import annotations

import sys
from typing import Iterable, Iterator, TypeVar

from tqdm import tqdm

T = TypeVar("T")


def progress(items: Iterable[T], *, total: int | None = None, what: str = "", unit: str = "file") -> Iterator[T]:
    """Wrap ``items`` in a bar on stderr when stderr is a terminal."""
    return iter(tqdm(items, total=total, desc=what, unit=unit, disable=not sys.stderr.isatty(),
                     leave=False, dynamic_ncols=True, file=sys.stderr))
