"""The one exception hierarchy of labtool; the CLI maps each class to an exit code."""

from __future__ import annotations


class LabtoolError(Exception):
    """Base of every error labtool reports to a user (one line, no traceback)."""

    exit_code = 2

    def __init__(self, message: str):
        super().__init__(message)
        self.message = message

    def __str__(self) -> str:
        return self.message


def printable(text: str) -> str:
    """Control characters escaped, so a hostile file name cannot split or forge an error line."""
    return "".join(ch if ch.isprintable() else repr(ch)[1:-1] for ch in text)


class UsageError(LabtoolError):
    """A command-line value or API argument that makes no sense."""

    exit_code = 2


class InputError(LabtoolError):
    """A file that cannot be read as a capture: names the file, the place and what is wrong."""

    exit_code = 1

    def __init__(self, path: str, what: str, *, line: int | None = None, field: str | None = None):
        self.path = str(path)
        self.line = line
        self.field = field
        self.what = what
        where = printable(self.path)
        if line is not None:
            where += f":{line}"
        if field is not None:
            where += f" [{field}]"
        super().__init__(f"{where}: {what}")


class StoreError(LabtoolError):
    """The campaign store is missing, locked, corrupt or of another schema version."""

    exit_code = 3


class MeasurementError(LabtoolError):
    """A capture lacks what a measurement needs (for example no supply channel)."""

    exit_code = 1


class ModelError(LabtoolError):
    """A design file or model parameter is invalid, or the model could not be solved."""

    exit_code = 5


class InstrumentError(LabtoolError):
    """Anything that went wrong talking to a bench instrument (outputs were switched off)."""

    exit_code = 4

    def __init__(self, message: str, *, instrument: str | None = None, command: str | None = None):
        super().__init__(message)
        self.instrument = instrument
        self.command = command


class InstrumentTimeout(InstrumentError):
    """The instrument did not answer within the timeout."""


class ConnectionLost(InstrumentError):
    """The link to the instrument dropped, was reset or refused."""


class BlockError(InstrumentError):
    """An IEEE 488.2 binary block was malformed, truncated or of the wrong length."""


class NoAcquisition(InstrumentError):
    """The scope's wait said not done, or its frame is stale (identical to the previous one, or taken
    before the supply was switched on): there is no new acquisition to store."""


class OffPlanCapture(InstrumentError):
    """The measured supply ramp or final supply voltage is not what the plan asked for."""


class OutputNotOff(InstrumentError):
    """A supply output could not be confirmed off: the run stops and never switches it on again."""

    exit_code = 6


class ScpiError(InstrumentError):
    """An entry of the instrument's SCPI error queue, attached to the command that caused it."""

    def __init__(self, code: int, text: str, command: str | None = None, instrument: str | None = None):
        self.code = code
        self.text = text
        msg = f'SCPI error {code},"{text}"'
        if command:
            msg += f" after {command!r}"
        if instrument:
            msg = f"{instrument}: {msg}"
        super().__init__(msg, instrument=instrument, command=command)


class ProfileError(InstrumentError):
    """A command profile is invalid or lacks an operation a driver needs (nothing was driven)."""

    exit_code = 2


class Terminated(KeyboardInterrupt):
    """A terminating signal (SIGINT, SIGTERM, SIGHUP) stopped the command; handled like Ctrl-C.

    Exits with 128 + the signal number, the shell's convention (130, 143, 129)."""

    def __init__(self, signum: int, name: str):
        super().__init__(f"stopped by {name}")
        self.signum = signum
        self.name = name
        self.exit_code = 128 + signum

    def __str__(self) -> str:
        return f"stopped by {self.name}"


class PlanError(LabtoolError):
    """An acquisition plan is invalid."""

    exit_code = 2
