"""Unit-cell placement patterns under systematic process gradients: pure geometry and the shifts they cause.

A candidate is a grid of unit cells, one string per row and one letter per cell; row r, column c sits at
(c * pitch_x, r * pitch_y), first row at y = 0. With origin "center" coordinates are taken relative to the centre of
the array's bounding box (the midpoint of the first and last cell centres in x and in y); with "corner", relative to
the first cell of the first row.

Systematic field, for the threshold [V] and likewise for dbeta/beta [1]:
    f(x, y) = g_x x + g_y y + q_x x^2 + q_y y^2 + s x y.
Each device's systematic shift is the mean of f over its cells: a device is its cells in parallel, and for small
shifts the parallel current moves by the mean of the cell shifts. The linear part therefore depends only on the
device's centroid (the mean of its cell centres): two devices with a common centroid cancel any linear gradient
(Hastings, The Art of Analog Layout, 2nd ed., 2006, common-centroid rules), while the quadratic and saddle parts
depend on the spread of the cells too and are in general not cancelled.

The threshold field applies to the threshold as the tool stores it (its magnitude, for pmos as for nmos), the beta
field to beta as a relative change.

Pelgrom's distance term (Pelgrom, Duinmaijer, Welbers, IEEE JSSC 1989: sigma^2(dP) = A_P^2 / (W L) + S_P^2 D^2):
modelled as a random linear gradient per die, G = (G_x, G_y) with G_x, G_y independent N(0, S^2), drawn afresh for
every sample. A device then gets the extra term G . c_i (c_i its centroid), so the difference of any two devices has
sigma S * |c_i - c_j| = S * D exactly, for every pair and any orientation; a common-centroid pair (D = 0) sees none of
it. (Giving each device an independent term cannot reproduce S * D for all pairs at once: independent variances add,
squared distances do not.) The random gradients are drawn from their own stream, so the device mismatch draws stay
the same as the main run's (common random numbers across candidates).

Functions here take the config's :class:`~mcmatch.config.schema.Placement` and plain arrays; they never solve.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mcmatch.config.analysis import Placement


@dataclass(frozen=True)
class Layout:
    """Cell geometry of one candidate.

    letters: the letter of every cell (n_cells,); positions: cell centres (n_cells, 2) [m], origin applied;
    shape: (rows, columns of the longest row).
    """

    letters: tuple[str, ...]
    positions: np.ndarray
    shape: tuple[int, int]

    def cells_of(self, letter: str) -> np.ndarray:
        """Cell centres (k, 2) [m] of one letter."""
        mask = np.array([c == letter for c in self.letters], dtype=bool)
        return self.positions[mask]


def cell_layout(rows: list[str] | tuple[str, ...], pitch: tuple[float, float], origin: str = "center") -> Layout:
    """Cell centres of a pattern: row r, column c at (c * pitch_x, r * pitch_y) [m], shifted by the origin.

    origin "corner": the first cell of the first row at (0, 0); "center": the centre of the bounding box of the cell
    centres at (0, 0).
    """
    letters: list[str] = []
    xy: list[tuple[float, float]] = []
    for r, row in enumerate(rows):
        for c, letter in enumerate(row):
            letters.append(letter)
            xy.append((c * pitch[0], r * pitch[1]))
    positions = np.array(xy, dtype=float).reshape(-1, 2)
    n_cols = max((len(row) for row in rows), default=0)
    if origin == "center" and len(positions):
        centre = np.array([(n_cols - 1) * pitch[0] / 2.0, (len(rows) - 1) * pitch[1] / 2.0])
        positions = positions - centre
    elif origin != "corner" and origin != "center":
        raise ValueError(f"origin must be 'center' or 'corner', got {origin!r}")
    return Layout(letters=tuple(letters), positions=positions, shape=(len(rows), n_cols))


def gradient_field(
    positions: np.ndarray,
    linear: tuple[float, float] = (0.0, 0.0),
    quadratic: tuple[float, float] = (0.0, 0.0),
    saddle: float = 0.0,
) -> np.ndarray:
    """f = g_x x + g_y y + q_x x^2 + q_y y^2 + s x y at positions (k, 2) [m]; units of the coefficients times m^n."""
    x, y = positions[:, 0], positions[:, 1]
    return linear[0] * x + linear[1] * y + quadratic[0] * x**2 + quadratic[1] * y**2 + saddle * x * y


@dataclass(frozen=True)
class DeviceShifts:
    """Per placed device (keyed by MOSFET name): cell count, centroid [m], systematic dVt [V] and dbeta/beta [1]."""

    cells: dict[str, int]
    centroids: dict[str, tuple[float, float]]
    vth: dict[str, float]
    beta: dict[str, float]


def device_shifts(rows: list[str] | tuple[str, ...], placement: Placement) -> DeviceShifts:
    """Systematic shifts of every placed device in the pattern `rows`: the mean of the field over its cells."""
    layout = cell_layout(rows, placement.pitch, placement.origin)
    cells, centroids, vth, beta = {}, {}, {}, {}
    for name in dict.fromkeys(placement.devices.values()):  # a device may own several letters
        letters = [letter for letter, device in placement.devices.items() if device == name]
        pos = np.concatenate([layout.cells_of(letter) for letter in letters])
        cells[name] = int(len(pos))
        if len(pos) == 0:
            centroids[name] = (0.0, 0.0)
            vth[name] = beta[name] = 0.0
            continue
        centroid = pos.mean(axis=0)
        centroids[name] = (float(centroid[0]), float(centroid[1]))
        vth[name] = float(
            gradient_field(pos, placement.vth_gradient, placement.vth_quadratic, placement.vth_saddle).mean()
        )
        beta[name] = float(
            gradient_field(pos, placement.beta_gradient, placement.beta_quadratic, placement.beta_saddle).mean()
        )
    return DeviceShifts(cells=cells, centroids=centroids, vth=vth, beta=beta)


def shift_arrays(shifts: DeviceShifts, device_names: tuple[str, ...]) -> tuple[np.ndarray, np.ndarray]:
    """Per-device arrays in circuit order: threshold shift [V] and beta scale 1 + dbeta/beta [1]; unplaced get 0, 1."""
    vth = np.array([shifts.vth.get(n, 0.0) for n in device_names], dtype=float)
    scale = np.array([1.0 + shifts.beta.get(n, 0.0) for n in device_names], dtype=float)
    return vth, scale


def centroid_array(shifts: DeviceShifts, device_names: tuple[str, ...]) -> tuple[np.ndarray, np.ndarray]:
    """Centroids (n_devices, 2) [m] in circuit order and a mask of the placed devices (unplaced: 0 and False)."""
    c = np.array([shifts.centroids.get(n, (0.0, 0.0)) for n in device_names], dtype=float).reshape(-1, 2)
    placed = np.array([n in shifts.centroids and shifts.cells.get(n, 0) > 0 for n in device_names], dtype=bool)
    return c, placed


def distance_terms(
    centroids: np.ndarray, placed: np.ndarray, normals: np.ndarray, s_vt: float, s_beta: float
) -> tuple[np.ndarray, np.ndarray]:
    """Pelgrom's distance term as a random die gradient: extra dVt [V] and dbeta/beta [1], each (S, n_devices).

    centroids (n_devices, 2) [m]; placed: mask of devices in the pattern (others get 0); normals (S, 4): standard
    normal (G_x, G_y) of the threshold gradient, then of the beta gradient; s_vt [V/m], s_beta [1/m]. Any two placed
    devices at centroid distance D differ by a term of sigma S * D.
    """
    c = np.where(placed[:, None], centroids, 0.0)
    dvth = s_vt * (normals[:, 0:1] * c[None, :, 0] + normals[:, 1:2] * c[None, :, 1])
    dbeta = s_beta * (normals[:, 2:3] * c[None, :, 0] + normals[:, 3:4] * c[None, :, 1])
    return dvth, dbeta


def count_warnings(shifts: DeviceShifts, units: dict[str, int]) -> list[str]:
    """Warnings for devices whose cell count differs from their m (parallel units) in the netlist."""
    out = []
    for name, count in shifts.cells.items():
        m = units.get(name)
        if m is not None and count != m:
            out.append(
                f"device {name} has {count} cell{'s' if count != 1 else ''} in this pattern but m = {m} in the "
                "netlist; each cell is meant to be one of its parallel units"
            )
    return out


def pick_best(entries: list[dict], first_measure: str | None) -> str | None:
    """Name of the best candidate: highest yield fraction; ties broken by the smallest |systematic error| of
    `first_measure` (the first spec'd measure), then by order. Entries carrying an "error" are skipped."""
    best_key, best_name = None, None
    for i, entry in enumerate(entries):
        if "error" in entry:
            continue
        fraction = entry["yield"].get("fraction")
        fraction = -1.0 if fraction is None else float(fraction)
        systematic = 0.0
        if first_measure is not None:
            value = entry["measures"].get(first_measure, {}).get("systematic")
            systematic = abs(value) if value is not None else float("inf")
        key = (-fraction, systematic, i)
        if best_key is None or key < best_key:
            best_key, best_name = key, entry["name"]
    return best_name
