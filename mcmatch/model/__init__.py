"""Pure numpy models with a leading sample axis: devices, technology, netlist, MNA, small-signal, sensitivities."""
