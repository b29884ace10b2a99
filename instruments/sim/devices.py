"""Simulated scope, supply (with supply-current trace) and chamber behind the SCPI servers.

They speak the generic profile (``instruments/profiles/generic-scpi.toml``). The parts on the bench
are a :class:`WaveformSource`: given the slot routed to the supply, the sample instants and the
programmed ramp, supply voltage and chamber temperature, it returns the supply and reference-output
traces. Wiring of the simulated bench: scope channel 1 = supply, channel 2 = reference output;
the supply measures its own output current (trace ``CURRent``).
"""

from __future__ import annotations

import collections
import math
import threading
import time
from typing import Callable, Protocol

import numpy as np

from instruments.blocks import make_block
from instruments.sim.headers import match

ERROR_QUEUE_SIZE = 10


class WaveformSource(Protocol):
    def __call__(self, slot: int, t_s: np.ndarray, *, ramp_s: float, vdd_v: float,
                 temperature_c: float) -> dict[str, np.ndarray]:
        """Traces at model time ``t_s`` (0 = supply switched on): keys supply, output, supply_current."""


class CommandFailed(Exception):
    """Raised by a handler: becomes an error-queue entry (SCPI-1999 standard codes)."""

    def __init__(self, code: int, text: str):
        super().__init__(text)
        self.code, self.text = code, text


class SimDevice:
    """IEEE 488.2 common commands and a SCPI error queue; subclasses add their own commands."""

    identity = "LABTOOL-SIM,GENERIC,0,0.1"

    def __init__(self):
        self._errors: collections.deque[tuple[int, str]] = collections.deque()
        self._esr = 0
        self.lock = threading.RLock()
        self.commands: list[tuple[str, Callable[[str, tuple], str | bytes | None]]] = [
            ("*IDN?", lambda a, g: self.identity),
            ("*RST", lambda a, g: self.reset()),
            ("*CLS", lambda a, g: self._clear_status()),
            ("*OPC?", lambda a, g: self.operation_complete()),
            ("*OPC", lambda a, g: None),
            ("*WAI", lambda a, g: None),
            ("*ESR?", lambda a, g: self._read_esr()),
            (":SYSTem:ERRor[:NEXT]?", lambda a, g: self._next_error()),
        ]

    # -- error queue (SCPI-1999 Vol. 2 SYSTem:ERRor?; -350 replaces the newest entry when full) --
    def push_error(self, code: int, text: str) -> None:
        with self.lock:
            if len(self._errors) >= ERROR_QUEUE_SIZE:
                self._errors[-1] = (-350, "Queue overflow")
            else:
                self._errors.append((code, text))
            self._esr |= 1 << (5 if -199 <= code <= -100 else 4 if -299 <= code <= -200 else
                               2 if -499 <= code <= -400 else 3)

    def _next_error(self) -> str:
        with self.lock:
            code, text = self._errors.popleft() if self._errors else (0, "No error")
        return f'{code:+d},"{text}"'

    def _clear_status(self) -> None:
        with self.lock:
            self._errors.clear()
            self._esr = 0

    def _read_esr(self) -> str:
        with self.lock:
            value, self._esr = self._esr, 0  # *ESR? clears on read (IEEE 488.2 §10.12)
        return str(value)

    def reset(self) -> None:
        """*RST: back to the power-on settings."""

    def operation_complete(self) -> str:
        return "1"

    # -- dispatch ------------------------------------------------------------------------
    def handle(self, command: str) -> str | bytes | None:
        header, _, args = command.strip().partition(" ")
        for form, fn in self.commands:
            m = match(form, header)
            if m:
                try:
                    with self.lock:
                        return fn(args.strip(), m.groups())
                except CommandFailed as exc:
                    self.push_error(exc.code, f"{exc.text};{command[:40]}")
                    return None
                except Exception as exc:  # noqa: BLE001 - a simulator defect, reported as a device would, not a dead link
                    self.push_error(-300, f"Device-specific error;{type(exc).__name__}: {exc}"[:80])
                    return None
        self.push_error(-113, f"Undefined header;{header[:40]}")
        return None


def number_arg(args: str, low: float = -math.inf, high: float = math.inf) -> float:
    try:
        value = float(args.split(",")[0])
    except ValueError:
        raise CommandFailed(-224, "Illegal parameter value") from None
    if not low <= value <= high:
        raise CommandFailed(-222, "Data out of range")
    return value


def bool_arg(args: str) -> bool:
    word = args.strip().upper()
    if word in ("1", "ON"):
        return True
    if word in ("0", "OFF"):
        return False
    raise CommandFailed(-224, "Illegal parameter value")


def suffix(groups: tuple, default: int = 1) -> int:
    return int(groups[0]) if groups and groups[0] else default


class TraceEncoder:
    """FORMat:DATA INTeger,8|16 and FORMat:BORDer NORMal|SWAPped (SCPI-1999 Vol. 2 FORMat)."""

    def __init__(self):
        self.bits = 16
        self.big_endian = True

    def set_format(self, args: str) -> None:
        kind, _, bits = args.upper().partition(",")
        if not kind.startswith("INT") or bits.strip() not in ("8", "16"):
            raise CommandFailed(-224, "Illegal parameter value")
        self.bits = int(bits)

    def set_order(self, args: str) -> None:
        word = args.strip().upper()
        if word not in ("NORM", "NORMAL", "SWAP", "SWAPPED"):
            raise CommandFailed(-224, "Illegal parameter value")
        self.big_endian = word.startswith("NORM")

    def codes(self, values: np.ndarray, lsb: float, zero_level: float) -> np.ndarray:
        limit = 2 ** (self.bits - 1)
        codes = np.clip(np.round((values - zero_level) / lsb), -limit, limit - 1)
        return codes.astype(np.int8 if self.bits == 8 else np.int16)

    def block(self, codes: np.ndarray) -> bytes:
        dtype = np.dtype("i1") if self.bits == 8 else np.dtype(">i2" if self.big_endian else "<i2")
        return make_block(codes.astype(dtype).tobytes())

    def lsb(self, span: float) -> float:
        return span / 2 ** self.bits


class SimBench:
    """What the instruments share: the parts (a waveform source), the routed slot, the chamber.

    ``scope_cls`` / ``supply_cls`` put instruments of another command dialect on the same bench; a
    scope needs ``armed`` and ``trigger(ramp_s, vdd_v, temperature_c)``, a supply calls :meth:`power_on`.
    """

    def __init__(self, source: WaveformSource, *, slots: set[int] | None = None, noise_v: float = 0.5e-3,
                 seed: int = 0, chamber_tau_s: float = 0.2, ambient_c: float = 25.0, scope_cls=None,
                 supply_cls=None):
        self.source = source
        self.slots = slots
        self.slot = 1
        self.noise_v = noise_v
        self.rng = np.random.default_rng(seed)
        self.scope = (scope_cls or SimScope)(self)
        self.supply = (supply_cls or SimSupply)(self)
        self.chamber = SimChamber(ambient_c, chamber_tau_s)
        self.power_cycles = 0

    def power_on(self, ramp_s: float, vdd_v: float) -> None:
        self.power_cycles += 1
        if self.scope.armed:
            self.scope.trigger(ramp_s, vdd_v, self.chamber.temperature())  # records the current on its grid
        else:  # nobody watching: the supply still records its own current over 3 ramps + 200 µs
            t = np.linspace(0.0, 3 * ramp_s + 200e-6, 1000)
            self.supply.last_current = (t, self.traces(t, ramp_s, vdd_v, self.chamber.temperature()).get("supply_current"))

    def traces(self, t_model: np.ndarray, ramp_s: float, vdd_v: float, temperature_c: float) -> dict[str, np.ndarray]:
        if vdd_v <= 0:  # nothing powered: the inputs see ground
            return {"supply": np.zeros_like(t_model), "output": np.zeros_like(t_model)}
        out = self.source(self.slot, t_model, ramp_s=ramp_s, vdd_v=vdd_v, temperature_c=temperature_c)
        return {k: np.where(t_model < 0, 0.0, np.asarray(v, float)) for k, v in out.items()}


class TracingDevice(SimDevice):
    """A bench instrument that returns traces as blocks in the FORMat it was told."""

    def __init__(self, bench: SimBench):
        super().__init__()
        self.bench = bench
        self.encoder = TraceEncoder()
        self.reset()
        self.commands += [
            (":FORMat[:DATA]", lambda a, g: self.encoder.set_format(a)),
            (":FORMat:BORDer", lambda a, g: self.encoder.set_order(a)),
        ]


class SimScope(TracingDevice):
    identity = "LABTOOL-SIM,SCOPE-2CH,SIM0001,0.1"
    N_CHANNELS = 2
    WIRING = {1: "supply", 2: "output"}

    def __init__(self, bench: SimBench):
        super().__init__(bench)
        self.commands += [
            (":INPut#[:STATe]", lambda a, g: self._set(g, "on", bool_arg(a))),
            (":SENSe#:VOLTage[:DC]:RANGe[:UPPer]", lambda a, g: self._set(g, "span_v", number_arg(a, low=1e-3, high=100))),
            (":SENSe#:VOLTage[:DC]:OFFSet", lambda a, g: self._set(g, "offset_v", number_arg(a, low=-100, high=100))),
            (":SENSe:SWEep:TIME", lambda a, g: setattr(self, "record_s", number_arg(a, low=1e-9, high=100))),
            (":SENSe:SWEep:POINts", lambda a, g: setattr(self, "points", int(number_arg(a, low=16, high=10_000_000)))),
            (":SENSe:SWEep:OFFSet:TIME", lambda a, g: setattr(self, "pretrigger_s", -number_arg(a, low=-100, high=0))),
            (":TRIGger[:SEQuence]:SOURce", lambda a, g: setattr(self, "trigger_source", a.upper())),
            (":TRIGger[:SEQuence]:LEVel", lambda a, g: setattr(self, "trigger_level_v", number_arg(a))),
            (":TRIGger[:SEQuence]:SLOPe", lambda a, g: setattr(self, "trigger_slope", a.upper())),
            (":INITiate:CONTinuous", lambda a, g: None if not bool_arg(a) else self._refuse_continuous()),
            (":INITiate[:IMMediate]", lambda a, g: self._arm()),
            (":ABORt", lambda a, g: self._abort()),
            ("*TRG", lambda a, g: self._force_trigger()),
            (":STATus:OPERation:CONDition?", lambda a, g: str(8 if self.armed else 0)),
            (":TRACe:SCALing?", lambda a, g: self._scaling(self._trace_channel(a))),
            (":TRACe[:DATA]?", lambda a, g: self._data(self._trace_channel(a))),
        ]

    def reset(self) -> None:
        self.channels = {c: {"on": False, "span_v": 4.0, "offset_v": 0.0} for c in range(1, self.N_CHANNELS + 1)}
        self.record_s, self.points, self.pretrigger_s = 1e-3, 2000, 0.0
        self.trigger_source, self.trigger_level_v, self.trigger_slope = "INT1", 0.5, "POS"
        self.armed = False
        self.done = threading.Event()
        self.done.set()  # nothing pending: *OPC? answers at once
        self.acquired: dict[int, np.ndarray] = {}
        self.acquired_settings: dict[int, tuple[float, float]] = {}

    def _channel(self, groups) -> dict:
        ch = suffix(groups)
        if ch not in self.channels:
            raise CommandFailed(-114, "Header suffix out of range")
        return self.channels[ch]

    def _set(self, groups, key, value) -> None:
        self._channel(groups)[key] = value

    def _refuse_continuous(self) -> None:
        raise CommandFailed(-221, "Settings conflict")

    def _arm(self) -> None:
        self.armed = True
        self.done = threading.Event()
        self.acquired = {}

    def _abort(self) -> None:
        self.armed = False
        self.done.set()

    def _force_trigger(self) -> None:
        """*TRG: acquire now whatever the inputs see (the supply's present output, or nothing)."""
        sup = self.bench.supply
        self.trigger(sup.ramp_s, sup.voltage_v if sup.output_on else 0.0, self.bench.chamber.temperature())

    def _trace_channel(self, args: str) -> int:
        word = args.strip().upper()
        if not word.startswith("CH") or not word[2:].isdigit() or int(word[2:]) not in self.channels:
            raise CommandFailed(-224, "Illegal parameter value")
        return int(word[2:])

    def operation_complete(self) -> str:
        # *OPC? answers when the pending acquisition is complete (IEEE 488.2 §12.5.3 operation complete).
        self.lock.release()
        try:
            self.done.wait(30.0)
        finally:
            self.lock.acquire()
        return "1"

    def trigger(self, ramp_s: float, vdd_v: float, temperature_c: float) -> None:
        with self.lock:
            if not self.armed:
                return
            source = self.WIRING.get(int(self.trigger_source[-1]) if self.trigger_source[-1].isdigit() else 1,
                                     "supply")
            # The trigger fires where the rising supply ramp crosses the level: t = 0 there.
            t_trig = ramp_s * min(max(self.trigger_level_v / vdd_v, 0.0), 1.0) if source == "supply" and vdd_v > 0 else 0.0
            x_inc = self.record_s / self.points
            t_rel = -self.pretrigger_s + x_inc * np.arange(self.points)
            traces = self.bench.traces(t_rel + t_trig, ramp_s, vdd_v, temperature_c)
            for ch, role in self.WIRING.items():
                cfg = self.channels[ch]
                values = traces[role] + self.bench.rng.normal(0.0, self.bench.noise_v, self.points)
                lsb = self.encoder.lsb(cfg["span_v"])
                self.acquired[ch] = self.encoder.codes(values, lsb, cfg["offset_v"])
                self.acquired_settings[ch] = (lsb, cfg["offset_v"])
            self.bench.supply.last_current = (t_rel, traces.get("supply_current"))
            self.armed = False
            self.done.set()

    def _scaling(self, ch: int) -> str:
        if ch not in self.acquired:
            raise CommandFailed(-230, "Data corrupt or stale")
        lsb, zero_level = self.acquired_settings[ch]
        return scaling_text(self.points, self.record_s / self.points, -self.pretrigger_s, lsb, zero_level,
                            self.encoder.bits)

    def _data(self, ch: int) -> bytes:
        if ch not in self.acquired:
            raise CommandFailed(-230, "Data corrupt or stale")
        return self.encoder.block(self.acquired[ch])


def scaling_text(points: int, dt_s: float, t_first_s: float, lsb: float, zero_level: float, bits: int) -> str:
    """The generic profile's scaling reply: format bits, then labtool's record (code_zero is 0 here)."""
    return f"{bits},{points},{dt_s:.9e},{t_first_s:.9e},{lsb:.9e},0,{zero_level:.9e}"


class SimSupply(TracingDevice):
    identity = "LABTOOL-SIM,SUPPLY-1CH,SIM0002,0.1"
    CURRENT_SPAN_A = 2e-3

    def __init__(self, bench: SimBench):
        super().__init__(bench)
        self.commands += [
            (":ROUTe:CLOSe", lambda a, g: self._route(a)),
            (":ROUTe:CLOSe?", lambda a, g: f"(@{self.bench.slot})"),
            (":SOURce#:VOLTage[:LEVel][:IMMediate][:AMPLitude]", lambda a, g: self._set("voltage_v", number_arg(a, 0, 30))),
            (":SOURce#:VOLTage[:LEVel][:IMMediate][:AMPLitude]?", lambda a, g: f"{self.voltage_v:.6e}"),
            (":SOURce#:CURRent:LIMit[:AMPLitude]", lambda a, g: self._set("current_limit_a", number_arg(a, 1e-6, 3))),
            (":SOURce#:CURRent:LIMit[:AMPLitude]?", lambda a, g: _num_or_nan(self.current_limit_a)),
            (":SOURce#:VOLTage:PROTection[:LEVel]", lambda a, g: self._set("ovp_v", number_arg(a, 0, 33))),
            (":SOURce#:VOLTage:PROTection[:LEVel]?", lambda a, g: _num_or_nan(self.ovp_v)),
            (":SOURce#:VOLTage:RAMP:TIME", lambda a, g: self._set("ramp_s", number_arg(a, 1e-7, 100))),
            (":SOURce#:VOLTage:RAMP:TIME?", lambda a, g: f"{self.ramp_s:.6e}"),
            (":OUTPut#[:STATe]", lambda a, g: self._output(bool_arg(a))),
            (":OUTPut#[:STATe]?", lambda a, g: "1" if self.output_on else "0"),
            (":MEASure[:SCALar]:CURRent[:DC]?", lambda a, g: self._measure_current()),
            (":TRACe:SCALing?", lambda a, g: self._scaling(a)),
            (":TRACe[:DATA]?", lambda a, g: self._data(a)),
        ]

    def reset(self) -> None:
        self.voltage_v, self.ramp_s = 0.0, 1e-3
        self.current_limit_a: float | None = None
        self.ovp_v: float | None = None
        self.output_on = False
        self.last_current: tuple[np.ndarray, np.ndarray | None] | None = None
        self.on_events = 0
        self.off_events = 0

    def _set(self, key, value) -> None:
        if self.output_on and key == "ramp_s":
            raise CommandFailed(-221, "Settings conflict")
        setattr(self, key, value)

    def _route(self, args: str) -> None:
        text = args.strip()
        if not (text.startswith("(@") and text.endswith(")") and text[2:-1].isdigit()):
            raise CommandFailed(-224, "Illegal parameter value")
        slot = int(text[2:-1])
        if self.bench.slots is not None and slot not in self.bench.slots:
            raise CommandFailed(-222, "Data out of range")
        if self.output_on:
            raise CommandFailed(-221, "Settings conflict")  # never switch parts with power applied
        self.bench.slot = slot

    def _output(self, on: bool) -> None:
        if on and (self.current_limit_a is None or self.ovp_v is None):
            raise CommandFailed(-221, "Settings conflict")  # this supply insists on limits first
        if on and self.voltage_v > self.ovp_v:
            raise CommandFailed(-221, "Settings conflict")
        if on and not self.output_on:
            self.output_on = True
            self.on_events += 1
            self.bench.power_on(self.ramp_s, self.voltage_v)
        elif not on:
            if self.output_on:
                self.off_events += 1
            self.output_on = False

    def _measure_current(self) -> str:
        if not self.output_on or self.last_current is None or self.last_current[1] is None:
            return "0.000000e+00"
        return f"{float(self.last_current[1][-1]):.6e}"

    def _current_trace(self, args: str) -> tuple[np.ndarray, np.ndarray]:
        if args.strip().upper() not in ("CURR", "CURRENT"):
            raise CommandFailed(-224, "Illegal parameter value")
        if self.last_current is None or self.last_current[1] is None:
            raise CommandFailed(-230, "Data corrupt or stale")
        return self.last_current

    def _scaling(self, args: str) -> str:
        t, _ = self._current_trace(args)
        return scaling_text(t.size, float(t[1] - t[0]), float(t[0]), self.encoder.lsb(self.CURRENT_SPAN_A), 0.0,
                            self.encoder.bits)

    def _data(self, args: str) -> bytes:
        _, current = self._current_trace(args)
        noisy = current + self.bench.rng.normal(0.0, 1e-7, current.size)
        return self.encoder.block(self.encoder.codes(noisy, self.encoder.lsb(self.CURRENT_SPAN_A), 0.0))


def _num_or_nan(value: float | None) -> str:
    return "9.91E+37" if value is None else f"{value:.6e}"  # SCPI-1999 not-a-number for "not set"


class SimChamber(SimDevice):
    """A chamber whose air temperature follows its set point as a first-order lag (time constant tau)."""

    identity = "LABTOOL-SIM,CHAMBER,SIM0003,0.1"

    def __init__(self, ambient_c: float = 25.0, tau_s: float = 0.2):
        super().__init__()
        self.tau_s = tau_s
        self._from_c = self._to_c = ambient_c
        self._since = time.monotonic()
        self.commands += [
            (":SOURce:TEMPerature:SPOint", lambda a, g: self._set_point(number_arg(a, -70, 180))),
            (":SOURce:TEMPerature:SPOint?", lambda a, g: f"{self._to_c:.3f}"),
            (":MEASure[:SCALar]:TEMPerature?", lambda a, g: f"{self.temperature():.3f}"),
        ]

    def temperature(self) -> float:
        elapsed = time.monotonic() - self._since
        return self._to_c + (self._from_c - self._to_c) * math.exp(-elapsed / self.tau_s)

    def _set_point(self, value: float) -> None:
        self._from_c, self._to_c, self._since = self.temperature(), value, time.monotonic()
