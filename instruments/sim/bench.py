"""Start the simulated bench: scope, supply and chamber servers on 127.0.0.1, in this process."""

from __future__ import annotations

from instruments.sim.devices import SimBench, WaveformSource
from instruments.sim.server import ScpiServer
from labtool.errors import InstrumentError


class RunningBench:
    """The three servers; ``resources`` maps role → VISA resource string. Stop with :meth:`stop`."""

    def __init__(self, source: WaveformSource, *, port: int = 0, slots: set[int] | None = None, seed: int = 0):
        self.bench = SimBench(source, slots=slots, seed=seed)
        devices = {"scope": self.bench.scope, "supply": self.bench.supply, "chamber": self.bench.chamber}
        self.servers: dict[str, ScpiServer] = {}
        try:
            for i, (role, device) in enumerate(devices.items()):
                self.servers[role] = ScpiServer(device, port=port + i if port else 0).start()
        except OSError as exc:
            self.stop()
            raise InstrumentError(f"cannot listen on 127.0.0.1 port {port + len(self.servers)}: {exc.strerror}") from None

    @property
    def resources(self) -> dict[str, str]:
        return {role: s.resource for role, s in self.servers.items()}

    def stop(self) -> None:
        for s in self.servers.values():
            s.stop()

    def __enter__(self) -> "RunningBench":
        return self

    def __exit__(self, *exc) -> None:
        self.stop()


def start_population_bench(population_path: str, *, port: int = 0) -> RunningBench:
    from instruments.sim.population import ModelSource, load_population

    population = load_population(population_path)
    try:
        source = ModelSource(population)
    except ImportError as exc:
        raise InstrumentError(f"the simulated bench needs the startup model (labtool.model): {exc}") from None
    return RunningBench(source, port=port, slots=set(population.by_slot()), seed=population.seed)
