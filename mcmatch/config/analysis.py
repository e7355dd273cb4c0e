"""The [analysis] and [placement] tables of a config as pydantic models (SI units): the yield target, corners, area
sweep, high-sigma estimate, bank, sizing study and placement candidates."""

from __future__ import annotations

from typing import Annotated, Literal

from pydantic import Field, model_validator

from mcmatch.config.fields import Frozen, Name, Number, Q

#: What each ``[analysis] variation`` mode draws per sample (one sample is one die), in the words the console and
#: the report use.
VARIATION_MODES = {
    "local": "per-device mismatch only (no die-to-die process spread; corners cover the process)",
    "global": "die-to-die process spread only (no per-device mismatch)",
    "both": "per-device mismatch plus die-to-die process spread, one draw per die",
}


# --------------------------------------------------------------------------------------------- analysis
class Target(Frozen):
    yield_: Number = Field(default=0.9973, alias="yield", gt=0, lt=1)
    confidence: Number = Field(default=0.95, gt=0, lt=1)
    k_sigma: Number | None = Field(default=None, gt=0, le=20)


class CornerStudy(Frozen):
    process: list[Name] | None = None
    temperature: list[Q("K")] | None = None
    supply: list[Q("V")] | None = None
    supply_scale: list[Number] | None = None
    supply_source: Name = "VDD"
    samples: int = Field(default=2000, ge=10, le=100_000_000)

    @model_validator(mode="after")
    def _supply(self) -> CornerStudy:
        if self.supply is not None and self.supply_scale is not None:
            raise ValueError("give 'supply' (absolute volts) or 'supply_scale' (factors), not both")
        for t in self.temperature or []:
            if not 1 <= t <= 1000:
                raise ValueError("temperatures must lie between 1 K and 1000 K")
        for v in self.supply or []:
            if not -1e4 <= v <= 1e4:
                raise ValueError("supply voltages must lie within +-10 kV")
        for s in self.supply_scale or []:
            if not 0 < s < 10:
                raise ValueError("supply_scale factors must lie between 0 and 10")
        return self


class AreaStudy(Frozen):
    devices: list[Name] = Field(min_length=1)
    scale: list[Annotated[Number, Field(gt=0, le=1e4)]] = Field(default=[0.25, 0.5, 1, 2, 4], min_length=2)
    mode: Literal["aspect", "units"] = "aspect"
    samples: int | None = Field(default=None, ge=100, le=100_000_000)


class HighSigma(Frozen):
    method: Literal["importance"] = "importance"
    samples: int = Field(default=20000, ge=100, le=100_000_000)
    measures: list[Name] | None = None  # spec'd measures to estimate (default: every spec'd measure)


class Bank(Frozen):
    """Joint yield of a multi-output bank: the channels are these spec'd measures (default: every spec'd measure)."""

    measures: list[Name] | None = Field(default=None, min_length=1)
    samples: int | None = Field(default=None, ge=10, le=100_000_000)


class SizingStudy(Frozen):
    """[analysis.sizing]: W and L of device groups for the joint-yield target under a headroom limit (SI units)."""

    groups: dict[Name, list[Name]] | None = None  # devices scaled together, sizes kept relative; default: by polarity
    w: list[Q("m")] = Field(min_length=2, max_length=2)  # search range of the unit W [m]
    l: list[Q("m")] = Field(min_length=2, max_length=2)  # noqa: E741 - search range of the unit L [m]
    min_headroom: Q("V") = Field(default=0.05, ge=-10, le=10)  # Vds - Vdsat of every device at every corner [V]
    max_area: Q("m^2") | None = Field(default=None, gt=0, le=1.0)  # total gate area allowed [m^2]
    aspects: int = Field(default=7, ge=2, le=64)  # W/L grid points per group before refinement
    samples: int = Field(default=20000, ge=100, le=100_000_000)  # confirming Monte Carlo samples
    max_confirmations: int = Field(default=3, ge=1, le=20)

    @model_validator(mode="after")
    def _ranges(self) -> SizingStudy:
        for key in ("w", "l"):
            low, high = getattr(self, key)
            if not 0 < low < high <= 0.1:
                raise ValueError(f"'{key}' must be [minimum, maximum] with 0 < minimum < maximum <= 10 cm")
        return self


class Analysis(Frozen):
    samples: int = Field(default=10000, ge=1, le=10_000_000_000)
    seed: int = Field(default=1, ge=0, le=2**63 - 1)
    sampling: Literal["random", "sobol"] = "random"
    variation: Literal["local", "global", "both"] = "local"  # mismatch, global process spread, or both
    keep_samples: int = Field(default=100_000, ge=0)
    target: Target = Target()
    corners: CornerStudy | None = None
    area: AreaStudy | None = None
    high_sigma: HighSigma | None = None
    bank: Bank | None = None
    sizing: SizingStudy | None = None
    contributions: bool = True


# --------------------------------------------------------------------------------------------- placement
class PlacementCandidate(Frozen):
    """One arrangement of unit cells: one string per row, one letter per cell, first row at y = 0."""

    name: Name
    rows: list[Annotated[str, Field(min_length=1, max_length=400)]] = Field(min_length=1, max_length=400)


class Placement(Frozen):
    """Unit-cell patterns of matched devices under systematic process gradients (SI units).

    vth_gradient [V/m] and beta_gradient [1/m]: linear terms (d/dx, d/dy); *_quadratic [V/m^2], [1/m^2]: the x^2 and
    y^2 terms; *_saddle: the x*y term; s_vt [V/m] and s_beta [1/m]: Pelgrom's distance terms (sigma grows as S*D).
    """

    pitch: tuple[Q("m"), Q("m")]
    devices: dict[Annotated[str, Field(min_length=1, max_length=1)], Name]
    dummy: Annotated[str, Field(min_length=1, max_length=1)] = "D"
    vth_gradient: tuple[Q("V/m"), Q("V/m")] = (0.0, 0.0)
    beta_gradient: tuple[Q("1/m"), Q("1/m")] = (0.0, 0.0)
    vth_quadratic: tuple[Q("V/m^2"), Q("V/m^2")] = (0.0, 0.0)
    beta_quadratic: tuple[Q("1/m^2"), Q("1/m^2")] = (0.0, 0.0)
    vth_saddle: Q("V/m^2") = 0.0
    beta_saddle: Q("1/m^2") = 0.0
    origin: Literal["corner", "center"] = "center"
    s_vt: Q("V/m") = Field(default=0.0, ge=0)
    s_beta: Q("1/m") = Field(default=0.0, ge=0)
    samples: int | None = Field(default=None, ge=10, le=100_000_000)  # Monte Carlo samples per candidate
    candidate: list[PlacementCandidate] = Field(min_length=1)

    @model_validator(mode="after")
    def _letters(self) -> Placement:
        if self.pitch[0] <= 0 or self.pitch[1] <= 0:
            raise ValueError("pitch must be positive in x and y")
        if self.dummy in self.devices:
            raise ValueError(f"letter '{self.dummy}' is the dummy cell; choose another letter for the device")
        allowed = set(self.devices) | {self.dummy}
        names = [c.name for c in self.candidate]
        if len(set(names)) != len(names):
            raise ValueError("candidate names must be unique")
        for c in self.candidate:
            for row in c.rows:
                bad = set(row) - allowed
                if bad:
                    raise ValueError(
                        f"candidate '{c.name}' uses letters {sorted(bad)}; expected only {sorted(allowed)}"
                    )
            for letter in self.devices:
                if not any(letter in row for row in c.rows):
                    raise ValueError(f"candidate '{c.name}' places no cell of device letter '{letter}'")
        return self
