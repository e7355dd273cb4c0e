"""Sizing a template's load current sources: the one solve that config loading leaves to the run layer.

A template with ``output_load = "current"`` and no ``load_current`` expands to load sources ILOAD<k> whose value is
``AUTO`` plus a :class:`~mcmatch.config.schema.LoadSizing` (see :mod:`mcmatch.config.templates`). Here the loads get
the current each output carries with the outputs held at their output voltage: the template's own netlist (not the
elements added beside it, not scaled by an area study), no mismatch, nominal corner, the config's temperature. Every
condition prepared from the config (main run, corners, area points, check) therefore sees the same load currents.
"""

from __future__ import annotations

from mcmatch.config.schema import AUTO, Config, LoadSizing, Netlist, Technology
from mcmatch.errors import ConfigError, SolveError
from mcmatch.model.circuit import compile_circuit
from mcmatch.model.technology import device_parameters
from mcmatch.solve.reference import nominal_point


def resolve_loads(config: Config) -> Config:
    """The config with every AUTO load current sized [A] (the config itself when there is none).

    ConfigError (key ``circuit.load_current``) if an output carries no current; SolveError if the held circuit has no
    operating point: both ask for an explicit ``load_current``.
    """
    sizing = config.circuit.load_sizing
    if sizing is None:
        return config
    currents = load_currents(sizing, config.technology, config.temperature, config.path)
    return config.with_circuit(with_load_currents(config.circuit, currents))


def load_currents(sizing: LoadSizing, technology: Technology, temperature: float, file: str) -> dict[str, float]:
    """Load source name -> current [A] its output carries when held at its output voltage, at `temperature` [K]."""
    held = sizing.held
    circuit = compile_circuit(held, device_parameters(held, technology, temperature))
    try:
        x = nominal_point(circuit)
    except SolveError as exc:
        raise SolveError(
            f"{file}: sizing the load current sources: the circuit with its outputs held at output_voltage has no "
            f"operating point ({exc.message}); give load_current"
        ) from None
    names = [v.name for v in held.voltage_source]
    currents = {}
    for k, (load, source) in enumerate(sizing.loads.items(), start=1):
        current = sizing.sign * float(x[circuit.n_nodes + names.index(source)])
        if not current > 0:
            raise ConfigError(
                f"output {k} carries no current at its output_voltage ({current:.3g} A); the load current cannot be "
                "sized from it: give load_current",
                file=file,
                key="circuit.load_current",
            )
        currents[load] = current
    return currents


def with_load_currents(netlist: Netlist, currents: dict[str, float]) -> Netlist:
    """`netlist` with the AUTO sources named in `currents` set to them [A] and its load sizing dropped."""
    missing = [name for name in netlist.auto_sources if name not in currents]
    if missing:
        raise ValueError(f"no current given for the load source(s) {missing}")
    sources = [
        c.model_copy(update={"value": currents[c.name]}) if c.value == AUTO else c for c in netlist.current_source
    ]
    return netlist.model_copy(update={"current_source": sources, "load_sizing": None})
