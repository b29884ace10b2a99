"""Raw traces off the bench → one labtool Capture, with provenance that hashes what came off the wire."""

from __future__ import annotations

import hashlib
import time
from typing import Mapping

import numpy as np

from instruments.scope import RawTrace
from labtool.capture import Capture, Channel, Conditions, Provenance, TimeBase
from labtool.errors import InstrumentError

UNITS = {"supply": "V", "output": "V", "supply_current": "A"}
NAMES = {"supply": "vdd", "output": "vref", "supply_current": "idd"}


def raw_digest(traces: Mapping[str, RawTrace], profile_sha256: Mapping[str, str]) -> str:
    """SHA-256 over every scaling reply and raw block (roles in a fixed order) and the profiles' hashes."""
    h = hashlib.sha256()
    for role in sorted(traces):
        t = traces[role]
        h.update(role.encode() + b"\0" + t.scaling_text.encode() + b"\0" + len(t.data).to_bytes(8, "big") + t.data)
    for role in sorted(profile_sha256):
        h.update(f"{role}:{profile_sha256[role]}".encode())
    return h.hexdigest()


def build_capture(traces: Mapping[str, RawTrace], conditions: Conditions, *, source_path: str, locator: str,
                  profile_sha256: Mapping[str, str], metadata: Mapping[str, str]) -> Capture:
    """The scope's supply and output traces share one time base; a current trace from another
    instrument is interpolated onto it (NaN outside its record, flagged as clipped)."""
    ref = traces["supply"].scaling
    p = traces["output"].scaling
    if not p.same_time_base(ref):
        raise InstrumentError(f"{locator}: output trace time base differs from the supply trace "
                              f"({p.points} pts, dt {p.dt_s:g} s vs {ref.points}, {ref.dt_s:g} s)")
    channels = []
    t_ref = ref.times()
    for role, trace in traces.items():
        values, clipped = trace.values, trace.clipped
        if not trace.scaling.same_time_base(ref):
            t = trace.scaling.times()
            values = np.interp(t_ref, t, values, left=np.nan, right=np.nan)
            clipped = np.isnan(values) | (np.interp(t_ref, t, clipped.astype(float)) > 0)
        channels.append(Channel(NAMES[role], UNITS[role], role, values, clipped))
    meta = {f"scaling_{role}": traces[role].scaling_text for role in traces}
    meta.update({f"profile_sha256_{role}": sha for role, sha in profile_sha256.items()})
    meta.update(metadata)
    prov = Provenance(source_path=source_path, sha256=raw_digest(traces, profile_sha256),
                      importer="instruments.acquire", imported_at=time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
                      locator=locator, metadata=meta)
    return Capture(time=TimeBase(n=ref.points, t0_s=ref.t_first_s, dt_s=ref.dt_s), channels=tuple(channels),
                   conditions=conditions, provenance=prov)
