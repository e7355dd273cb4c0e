"""Summary blocks of the designer's answers: saturation margin (compliance), global process spread (variation) and
sizing. SI units; every block allows keys it does not declare (the contract only adds keys)."""

from __future__ import annotations

from typing import Any

from pydantic import Field

from mcmatch.results.summary_blocks import Block


class Compliance(Block):
    """Saturation margin of a condition: headroom Vds - Vdsat with the model's own Vdsat."""

    min_headroom: float | None = Field(description="smallest headroom at the nominal point [V]")
    limiting_device: str | None = Field(description="the MOSFET with that headroom")
    devices_out_of_saturation: list[str] = Field(description="MOSFETs below zero headroom at the nominal point")
    samples_out_of_saturation: float | None = Field(
        description="fraction of the condition's Monte Carlo samples with any device below zero headroom [1]"
    )


class TiedCorner(Block):
    """A corner as bad as the worst one: within sampling error of its margin, or with the same spread."""

    process: str = Field(description="global process corner")
    temperature: float = Field(description="temperature [K]")
    supply: float | None = Field(description="supply [V]")
    margin_sigma: float | None = Field(None, description="its spec margin [sigma] (spec'd measures)")
    spread: float | None = Field(None, description="its spread, equal to the worst's to rounding [unit] (others)")


class VariationMeasure(Block):
    """One measure's spread split into its local (mismatch) and global (process) parts [unit of the measure]."""

    std_local: float | None = Field(description="from the per-device Pelgrom draws, linearised")
    std_global: float | None = Field(description="from the die-to-die draws, linearised")
    std_total: float | None = Field(description="sqrt(std_local^2 + std_global^2)")
    mc_std: float | None = Field(None, description="the Monte Carlo's own sigma")


class Variation(Block):
    """[analysis] variation "global" or "both": how each measure's spread divides."""

    mode: str = Field(description='"global" or "both"')
    method: str = Field(description="how the parts are computed")
    method_note: str | None = Field(None, description="the formula in words")
    statistics: dict[str, Any] | None = Field(None, description="the technology's [statistics] (SI)")
    random_stream: int | None = Field(None, description="random stream of the global draws")
    measures: dict[str, VariationMeasure] = Field(description="per measure")


class SizingGroup(Block):
    """The unit W and L of one device group."""

    w: float = Field(description="unit W [m]")
    l: float = Field(description="unit L [m]")  # noqa: E741 - the trade's name
    aspect: float = Field(description="W/L [1]")


class SizingDesign(Block):
    """One evaluated design of [analysis.sizing] (a design that could not be solved has `error` instead)."""

    groups: dict[str, dict[str, float]] = Field(description="per group: w [m], l [m], aspect [1]")
    unit_area: float | None = Field(None, description="W L of the unit [m^2]; null for the present design")
    area: float | None = Field(None, description="total gate area, sum of m W L [m^2]")
    sigma: dict[str, float] | None = Field(None, description="linear sigma per spec at the nominal condition")
    linear_yield: float | None = Field(None, description="linearised joint yield at its worst condition [1]")
    linear_yield_corner: str | None = Field(None, description="that condition")
    margin_sigma: float | None = Field(None, description="worst spec margin over conditions [sigma]")
    min_headroom: float | None = Field(None, description="smallest Vds - Vdsat over devices and conditions [V]")
    headroom_corner: str | None = Field(None, description="where")
    limiting_device: str | None = Field(None, description="which device")
    devices_out_of_saturation: list[str] | None = Field(None, description="devices below zero headroom anywhere")
    vdsat: float | None = Field(None, description="Vdsat of the first group's first device, nominal [V]")
    gm_over_id: float | None = Field(None, description="its gm/Id [1/V]")
    meets: dict[str, bool] | None = Field(None, description="yield, headroom, max_area")
    feasible: bool = Field(description="meets all three")
    conditions_evaluated: int | None = Field(None, description="conditions solved (1: short already at nominal)")
    error: str | None = Field(None, description="why the design could not be solved")


class SizingConfirmation(Block):
    """The full Monte Carlo that confirms a design at its worst-yield condition."""

    yield_: float | None = Field(alias="yield", description="Monte Carlo joint yield [1]")
    ci95: list[float] = Field(description="its two-sided 95 % Clopper-Pearson interval")
    samples: int = Field(description="samples")
    failed_solves: int = Field(description="failed solves (they fail the yield)")
    corner: str = Field(description="the condition it ran at")
    random_stream: int = Field(description="its random stream")
    consistent: bool = Field(description="the interval reaches the target")


class SizingChoice(Block):
    """The chosen design and how it was confirmed."""

    index: int = Field(description="index into designs")
    confirmed: SizingConfirmation = Field(description="the confirming Monte Carlo")
    confirmations: int = Field(description="Monte Carlo confirmations it took")


class Sizing(Block):
    """[analysis.sizing]: the evaluated designs, their Pareto front, the chosen one and its confirmation."""

    groups: dict[str, list[str]] = Field(description="devices sharing one unit W and L")
    target: dict[str, float] = Field(description="yield and confidence aimed at")
    min_headroom: float = Field(description="headroom limit [V]")
    max_area: float | None = Field(description="total gate area limit [m^2]")
    conditions: list[str] = Field(description="conditions checked: nominal, then every corner")
    method: str = Field(description="how the search works")
    designs: list[SizingDesign] = Field(description="every evaluated design")
    pareto: list[int] = Field(description="indices of designs on the front (area, margin, headroom)")
    solves: int = Field(description="nominal solves spent")
    present: dict[str, Any] | None = Field(None, description="the design as drawn, evaluated the same way")
    attempts: list[dict[str, Any]] | None = Field(None, description="every confirmation tried")
    chosen: SizingChoice | None = Field(None, description="the chosen design")
    infeasible: str | None = Field(None, description="why no design meets the target")
