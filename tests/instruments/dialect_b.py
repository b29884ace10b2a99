"""A second simulated command dialect, written for the tests and deliberately unlike the generic one.

Its own command tree (volts per division and a position in divisions, a time base per division, the
trigger position in percent, a slew rate instead of a ramp time, a socket selector), int16
little-endian blocks with no terminator after them, a scaling reply with text fields in its own
order that leaves out the code of zero volts and the point count (the profile asks for them with a
compound query and supplies a constant), a blocking acquisition wait answering 1 or 0, a text status
poll (WAIT / DONE / IDLE), its own error query ``ERR?`` and no ``*OPC?``. Invented instruments (a
property fixture, not a reference to any product).

Faults are switches on the devices: ``miss_triggers`` (the scope stays armed and keeps its last
frame, as many instruments do), ``trigger_at_arm`` (it triggers on noise at arming, before the supply
is on), ``wait_never_waits`` (its wait answers 1 at once). Link faults come from the server's Fault.
"""

from __future__ import annotations

import threading

import numpy as np

from instruments.blocks import make_block
from instruments.sim.devices import CommandFailed, SimBench, SimDevice, bool_arg, number_arg, suffix
from instruments.sim.server import ScpiServer

DIVISIONS = 10  # on screen, vertically and horizontally
CODES = 65536  # int16 over the full screen height


class DialectDevice(SimDevice):
    """The dispatch and error queue of the simulator, with this dialect's own common set."""

    def __init__(self):
        super().__init__()
        self.received: list[str] = []  # every command as it came, for tests of what a profile sends
        self.commands = [("*IDN?", lambda a, g: self.identity), ("ERR?", lambda a, g: self._next_error())]

    def handle(self, command: str):
        self.received.append(command.strip())
        return super().handle(command)


class DialectBScope(DialectDevice):
    identity = "SIMDIALECT-B,ACQ-2,SN-B0001,2.0"
    WIRING = {1: "supply", 2: "output"}

    def __init__(self, bench: SimBench):
        super().__init__()
        self.bench = bench
        self.vdiv = {1: 0.5, 2: 0.5}
        self.pos = {1: 0.0, 2: 0.0}  # divisions the trace is moved up: the centre shows −pos·vdiv volts
        self.shown = {1: False, 2: False}
        self.tdiv, self.npts, self.trig_pos_pct = 1e-4, 1000, 10.0
        self.trig_src, self.trig_level = 1, 0.5
        self.armed = False
        self.done = threading.Event()
        self.frames: dict[int, tuple] = {}  # channel → (codes, lsb, centre_v, tstep, trigger index)
        self.miss_triggers = 0
        self.trigger_at_arm = 0
        self.wait_never_waits = False
        self.commands += [
            ("CH#:DISP", lambda a, g: self._per_channel(g, self.shown, bool_arg(a))),
            ("CH#:VDIV", lambda a, g: self._per_channel(g, self.vdiv, number_arg(a, 1e-4, 20))),
            ("CH#:POS", lambda a, g: self._per_channel(g, self.pos, number_arg(a, -50, 50))),
            ("WAVE:FMT", lambda a, g: self._format(a)),
            ("TB:SCALE", lambda a, g: setattr(self, "tdiv", number_arg(a, 1e-9, 10))),
            ("ACQ:NPTS", lambda a, g: setattr(self, "npts", int(number_arg(a, 16, 1_000_000)))),
            ("ACQ:NPTS?", lambda a, g: str(self.npts)),
            ("TRIG:POS", lambda a, g: setattr(self, "trig_pos_pct", number_arg(a, 0, 100))),
            ("TRIG:SRC", lambda a, g: setattr(self, "trig_src", self._channel_word(a))),
            ("TRIG:LEV", lambda a, g: setattr(self, "trig_level", number_arg(a, -20, 20))),
            ("TRIG:EDGE", lambda a, g: None if a.strip().upper() == "RISE" else self._refuse()),
            ("ACQ:SINGLE", lambda a, g: self._arm()),
            ("TRIG:FORCE", lambda a, g: self._force()),
            ("ACQ:WAIT?", lambda a, g: self._wait(number_arg(a, 0, 3600) if a else 10.0)),
            ("ACQ:STATE?", lambda a, g: "WAIT" if self.armed else ("DONE" if self.frames else "IDLE")),
            ("WAVE:SCALE?", lambda a, g: self._scale(self._channel_word(a))),
            ("WAVE:DATA?", lambda a, g: self._data(self._channel_word(a))),
        ]

    def _per_channel(self, groups, table: dict, value) -> None:
        ch = suffix(groups)
        if ch not in table:
            raise CommandFailed(-114, "Header suffix out of range")
        table[ch] = value

    def _channel_word(self, args: str) -> int:
        word = args.strip().upper()
        if not (word.startswith("CH") and word[2:].isdigit() and int(word[2:]) in self.WIRING):
            raise CommandFailed(-224, "Illegal parameter value")
        return int(word[2:])

    def _format(self, args: str) -> None:
        if args.strip().upper() != "I16LE":
            raise CommandFailed(-224, "Illegal parameter value")

    def _refuse(self) -> None:
        raise CommandFailed(-224, "Illegal parameter value")

    def _arm(self) -> None:
        self.armed = True
        self.done = threading.Event()
        if self.trigger_at_arm:  # it triggers on noise now: the supply is not on yet
            self.trigger_at_arm -= 1
            self._acquire(1e-3, 0.0, self.bench.chamber.temperature())

    def _force(self) -> None:
        sup = self.bench.supply
        if self.armed:
            self._acquire(sup.ramp_s, sup.vset if sup.output_on else 0.0, self.bench.chamber.temperature())

    def trigger(self, ramp_s: float, vdd_v: float, temperature_c: float) -> None:
        with self.lock:
            if not self.armed:
                return
            if self.miss_triggers:
                self.miss_triggers -= 1  # stays armed, keeps the last frame
                return
            self._acquire(ramp_s, vdd_v, temperature_c)

    def _acquire(self, ramp_s: float, vdd_v: float, temperature_c: float) -> None:
        record = DIVISIONS * self.tdiv
        tstep = record / self.npts
        trig_index = int(round(self.trig_pos_pct / 100 * self.npts))
        t_rel = (np.arange(self.npts) - trig_index) * tstep
        t_trig = ramp_s * min(max(self.trig_level / vdd_v, 0.0), 1.0) if self.trig_src == 1 and vdd_v > 0 else 0.0
        traces = self.bench.traces(t_rel + t_trig, ramp_s, vdd_v, temperature_c)
        for ch, role in self.WIRING.items():
            lsb = DIVISIONS * self.vdiv[ch] / CODES
            centre = -self.pos[ch] * self.vdiv[ch]
            values = traces[role] + self.bench.rng.normal(0.0, self.bench.noise_v, self.npts)
            codes = np.clip(np.round((values - centre) / lsb), -32768, 32767).astype("<i2")
            self.frames[ch] = (codes, lsb, centre, tstep, trig_index)
        self.armed = False
        self.done.set()

    def _wait(self, timeout_s: float) -> str:
        if self.wait_never_waits:
            return "1"
        done = self.done
        self.lock.release()  # others may talk to the scope (and the supply trigger it) meanwhile
        try:
            happened = done.wait(timeout_s)
        finally:
            self.lock.acquire()
        return "1" if happened else "0"

    def _scale(self, ch: int) -> str:
        if ch not in self.frames:
            raise CommandFailed(-230, "Data corrupt or stale")
        _, lsb, centre, tstep, trig_index = self.frames[ch]
        return f"CH{ch},V,{tstep:.9e},{trig_index},{lsb:.9e},{centre:.9e}"  # npts comes from ACQ:NPTS?

    def _data(self, ch: int) -> bytes:
        if ch not in self.frames:
            raise CommandFailed(-230, "Data corrupt or stale")
        return make_block(self.frames[ch][0].tobytes(), trailer=b"")


class DialectBSupply(DialectDevice):
    identity = "SIMDIALECT-B,PSU-1,SN-B0002,2.0"
    DEFAULT_SLEW_V_PER_S = 1e4  # what it ramps at when no slew rate was programmed

    def __init__(self, bench: SimBench):
        super().__init__()
        self.bench = bench
        self.vset, self.slew = 0.0, self.DEFAULT_SLEW_V_PER_S
        self.ilim: float | None = None
        self.ovp: float | None = None
        self.output_on = False
        self.on_events = self.off_events = 0
        self.powered = threading.Event()  # set at every switch-on (tests wait for it)
        self.commands += [
            ("PSU:VSET", lambda a, g: setattr(self, "vset", number_arg(a, 0, 20))),
            ("PSU:ILIM", lambda a, g: setattr(self, "ilim", number_arg(a, 1e-6, 2))),
            ("PSU:OVP", lambda a, g: setattr(self, "ovp", number_arg(a, 0, 22))),
            ("PSU:SLEW", lambda a, g: setattr(self, "slew", number_arg(a, 1, 1e9))),
            ("PSU:OUT", lambda a, g: self._output(bool_arg(a))),
            ("PSU:OUT?", lambda a, g: "1" if self.output_on else "0"),
            ("PSU:SOCKET", lambda a, g: self._socket(int(number_arg(a, 1, 64)))),
            ("PSU:SOCKET?", lambda a, g: str(self.bench.slot)),
        ]

    @property
    def ramp_s(self) -> float:
        return self.vset / self.slew if self.vset > 0 else 1e-3

    def _socket(self, slot: int) -> None:
        if self.output_on:
            raise CommandFailed(-221, "Settings conflict")  # never switch parts with power applied
        self.bench.slot = slot

    def _output(self, on: bool) -> None:
        if on and (self.ilim is None or self.ovp is None or self.vset > self.ovp):
            raise CommandFailed(-221, "Settings conflict")
        if on and not self.output_on:
            self.output_on = True
            self.on_events += 1
            self.powered.set()
            self.bench.power_on(self.ramp_s, self.vset)
        elif not on and self.output_on:
            self.output_on = False
            self.off_events += 1


def dialect_b_bench(source, **kwargs) -> SimBench:
    """A bench of this dialect's scope and supply (and the generic simulated chamber), servers started."""
    bench = SimBench(source, scope_cls=DialectBScope, supply_cls=DialectBSupply, **kwargs)
    bench.servers = {"scope": ScpiServer(bench.scope).start(), "supply": ScpiServer(bench.supply).start()}
    return bench
