"""Per-device process parameters at a temperature and a global corner, as numpy arrays (SI units).

Temperature: vth(T) = vth0 + vth_tempco (T - T0); k'(T) = k'(T0) (T / T0)^mobility_exponent.
Corners: vth += vth_shift, k' *= kprime_scale, per polarity.
Pelgrom (pair convention, Pelgrom, Duinmaijer, Welbers 1989): each single device carries
sigma(dVt) = A_VT / sqrt(2 m W L) and sigma(dbeta/beta) = A_beta / sqrt(2 m W L).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from mcmatch.config.schema import Netlist, Technology
from mcmatch.model.devices import EKV, SQUARE_LAW, thermal_voltage


@dataclass(frozen=True)
class DeviceParameters:
    """Arrays of shape (n_devices,) describing every MOSFET of a circuit at one condition.

    polarity [+1 nmos, -1 pmos]; model [SQUARE_LAW or EKV]; vth [V] (magnitude, temperature and corner applied);
    beta [A/V^2] = k' m W / L; lam [1/V]; gamma [V^0.5]; phi [V]; slope [1]; ut [V];
    sigma_vth [V] and sigma_beta [1]: the single-device Pelgrom sigmas.
    """

    names: tuple[str, ...]
    polarity: np.ndarray
    model: np.ndarray
    vth: np.ndarray
    beta: np.ndarray
    lam: np.ndarray
    gamma: np.ndarray
    phi: np.ndarray
    slope: np.ndarray
    ut: float
    sigma_vth: np.ndarray
    sigma_beta: np.ndarray

    @property
    def count(self) -> int:
        return len(self.names)

    def with_shift(self, vth_shift: np.ndarray, beta_scale: np.ndarray) -> DeviceParameters:
        """A copy with systematic per-device shifts added (vth [V]) and multiplied (beta [1])."""
        return replace(self, vth=self.vth + vth_shift, beta=self.beta * beta_scale)


def pelgrom_sigma(coefficient: float | np.ndarray, area: float | np.ndarray) -> float | np.ndarray:
    """Single-device sigma from a PAIR-convention Pelgrom coefficient: coefficient / sqrt(2 * area).

    coefficient: A_VT [V*m] or A_beta [m]; area: m*W*L [m^2].
    """
    return np.asarray(coefficient) / np.sqrt(2.0 * np.asarray(area))


def pair_sigma(coefficient: float, area_1: float, area_2: float | None = None) -> float:
    """Sigma of the difference of two devices (Pelgrom 1989): sqrt(A^2/2 (1/A1 + 1/A2)); equal areas -> A/sqrt(WL)."""
    area_2 = area_1 if area_2 is None else area_2
    return float(np.sqrt(coefficient**2 / 2.0 * (1.0 / area_1 + 1.0 / area_2)))


def device_parameters(
    netlist: Netlist, technology: Technology, temperature: float, corner: str = "tt"
) -> DeviceParameters:
    """Resolve every MOSFET of `netlist` at `temperature` [K] and global `corner`."""
    shift = technology.corner(corner)
    t0 = technology.nominal_temperature
    rows = []
    for m in netlist.mosfet:
        p = getattr(technology, m.type)
        s = getattr(shift, m.type)
        vth = p.vth0 + p.vth_tempco * (temperature - t0) + s.vth_shift
        kprime = p.kprime * (temperature / t0) ** p.mobility_exponent * s.kprime_scale
        rows.append(
            (
                1.0 if m.type == "nmos" else -1.0,
                SQUARE_LAW if p.model == "square-law" else EKV,
                vth,
                kprime * m.m * m.w / m.l,
                p.channel_length_modulation(m.l),
                p.gamma,
                p.phi,
                p.slope,
                pelgrom_sigma(p.a_vt, m.area),
                pelgrom_sigma(p.a_beta, m.area),
            )
        )
    cols = list(zip(*rows, strict=True))
    return DeviceParameters(
        names=tuple(m.name for m in netlist.mosfet),
        polarity=np.array(cols[0]),
        model=np.array(cols[1], dtype=int),
        vth=np.array(cols[2]),
        beta=np.array(cols[3]),
        lam=np.array(cols[4]),
        gamma=np.array(cols[5]),
        phi=np.array(cols[6]),
        slope=np.array(cols[7]),
        ut=float(thermal_voltage(temperature)),
        sigma_vth=np.array(cols[8], dtype=float),
        sigma_beta=np.array(cols[9], dtype=float),
    )
