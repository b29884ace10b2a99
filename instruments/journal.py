"""The acquisition journal: an append-only JSON-lines log in the campaign directory.

It records what a run did (start, each stored capture, retries, aborts) so an engineer can read
what happened at 3 a.m. Which steps are done is decided from the store itself (a capture with the
step's locator), so a crash between storing a capture and journaling it never repeats the step.
"""

from __future__ import annotations

import json
import os
import re
import time
from pathlib import Path
from typing import Any, Iterator

JOURNAL_DIR = "journal"


class Journal:
    def __init__(self, campaign_root: Path, plan_name: str):
        safe = re.sub(r"[^A-Za-z0-9._-]+", "_", plan_name).strip("._") or "plan"
        self.path = Path(campaign_root) / JOURNAL_DIR / f"acquire-{safe}.jsonl"
        self.path.parent.mkdir(parents=True, exist_ok=True)

    def write(self, event: str, **fields: Any) -> None:
        record = {"at": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()), "event": event, **fields}
        line = json.dumps(record, sort_keys=True, default=str) + "\n"
        with open(self.path, "a", encoding="utf-8") as fh:
            fh.write(line)
            fh.flush()
            os.fsync(fh.fileno())

    def events(self) -> Iterator[dict]:
        """Every complete record (a line cut short by a crash is skipped)."""
        if not self.path.exists():
            return
        with open(self.path, encoding="utf-8") as fh:
            for line in fh:
                try:
                    yield json.loads(line)
                except json.JSONDecodeError:
                    continue

