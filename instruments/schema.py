"""Building frozen dataclasses from TOML tables with errors that name the file, table and field."""

from __future__ import annotations

import dataclasses
from typing import Any, Mapping

_CHECKS = {"float": (int, float), "int": (int,), "str": (str,), "bool": (bool,)}


def build(cls, values: Mapping[str, Any], where: str, error: type[Exception]):
    """``cls(**values)``; unknown fields, missing fields and wrong value types raise ``error``."""
    known = cls.__dataclass_fields__
    unknown = [k for k in values if k not in known]
    if unknown:
        raise error(f"{where}: unknown field(s) {', '.join(unknown)} (known: {', '.join(known)})")
    try:
        obj = cls(**{k: (tuple(v) if isinstance(v, list) else v) for k, v in values.items()})
    except TypeError as exc:
        raise error(f"{where}: {exc}") from None
    for f in dataclasses.fields(cls):
        value = getattr(obj, f.name)
        base = str(f.type).replace(" | None", "")
        allowed = _CHECKS.get(base)
        if value is None or allowed is None:
            continue
        if not isinstance(value, allowed) or (base != "bool" and isinstance(value, bool)):
            raise error(f"{where} {f.name}: {value!r} is not {'a number' if base == 'float' else 'a ' + base}")
    return obj
