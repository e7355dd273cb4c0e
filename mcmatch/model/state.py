"""What a device model returns, and the array helpers the device models share.

A :class:`DeviceState` holds one MOSFET's channel current and its first derivatives at a batch of points, in the
n-channel sense (a p-channel caller negates the four terminal voltages going in and the results coming out).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

FloatArray = float | np.ndarray
DeviceCurrents = tuple[FloatArray, FloatArray, FloatArray, FloatArray, FloatArray]


@dataclass
class DeviceState:
    """Current i [A] flowing from drain to source, d i / d(vd, vg, vs, vb) [S] (None where a derivative was not asked
    for or is structurally zero: the square law's bulk derivative without body effect) and vdiff = vd - vs [V]."""

    i: np.ndarray
    di_dvd: np.ndarray
    di_dvg: np.ndarray
    di_dvs: np.ndarray
    di_dvb: np.ndarray | None
    vdiff: np.ndarray | float

    def currents(self) -> DeviceCurrents:
        """``(i, di_dvd, di_dvg, di_dvs, di_dvb)`` with a structurally zero bulk derivative filled in; 0-d arrays
        become numpy float64 scalars."""
        db = np.zeros_like(self.i) if self.di_dvb is None else self.di_dvb
        values = (self.i, self.di_dvd, self.di_dvg, self.di_dvs, db)
        i, dd, dg, ds, db = (finish(np.asarray(v, dtype=np.float64)) for v in values)
        return i, dd, dg, ds, db


def as_arrays(*values: FloatArray) -> list[np.ndarray]:
    """Convert to float64 and broadcast to one common shape (read-only views, no copies)."""
    return np.broadcast_arrays(*(np.asarray(v, dtype=np.float64) for v in values))


def finish(value: np.ndarray) -> FloatArray:
    """Return a numpy float64 scalar for 0-d results, the array otherwise."""
    return value[()] if np.ndim(value) == 0 else value


def is_zero(value: object) -> bool:
    """True for a plain (or numpy scalar) float equal to 0: a term the fast path may skip without changing bits."""
    return isinstance(value, float) and value == 0.0


def minimum(value: np.ndarray | float) -> float:
    """Smallest entry of a batch (the value itself for a scalar) [same unit]."""
    return float(np.min(value)) if isinstance(value, np.ndarray) else float(value)
