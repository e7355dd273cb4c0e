"""Blocks of summary.json written by the studies beyond the main run: corners, area versus accuracy, mismatch
contributions, placements, high-sigma yield and bank yield. SI units; [unit] is the unit of the measure concerned.
"""

from __future__ import annotations

from typing import Literal

from pydantic import Field

from mcmatch.results.summary_blocks import Block, YieldBlock
from mcmatch.results.summary_design import Compliance, TiedCorner


# --------------------------------------------------------------------------------------------- corners
class CornerMeasure(Block):
    """One measure at one corner."""

    nominal: float = Field(description="the corner's solve without mismatch [unit]")
    mean: float | None = Field(description="Monte Carlo mean [unit]")
    std: float | None = Field(description="Monte Carlo standard deviation [unit]")


class CornerSpecYield(Block):
    """One spec at one corner."""

    passed: int = Field(description="samples inside the spec")
    fraction: float | None = Field(description="passed / samples [1]")


class CornerYield(YieldBlock):
    """The joint yield at one corner."""

    specs: dict[str, CornerSpecYield] = Field(description="per spec'd measure")


class CornerEntry(Block):
    """One grid point of [analysis.corners]; a point without an operating point has only its keys and `error`."""

    process: str = Field(description="global process corner")
    temperature: float = Field(description="temperature [K]")
    supply: float | None = Field(description="value of the supply source [V]; null without a supply source")
    measures: dict[str, CornerMeasure] | None = Field(None, description="per measure")
    yield_: CornerYield | None = Field(None, alias="yield", description="joint and per-spec yield")
    samples: int | None = Field(None, description="Monte Carlo samples at this point")
    failed_solves: int | None = Field(None, description="samples whose solve failed")
    error: str | None = Field(None, description="why the point has no operating point")
    compliance: Compliance | None = Field(None, description="saturation margin at this point")


class WorstCorner(Block):
    """The worst grid point of one measure."""

    process: str = Field(description="global process corner")
    temperature: float = Field(description="temperature [K]")
    supply: float | None = Field(description="supply [V]")
    value: float | None = Field(description="the criterion's value: a yield [1] or a spread [unit]")
    criterion: str = Field(description="which rule chose the point")
    spread: float | None = Field(description="|mean - main nominal| + 3 std [unit]")
    margin_sigma: float | None = Field(None, description="spec margin min over limits of (limit - mean)/std [sigma]")
    margin_error: float | None = Field(None, description="its standard error, sqrt(1/N + z^2/(2(N-1))) [sigma]")
    limit: str | None = Field(None, description='which limit the margin is measured to: "min" or "max"')
    mean: float | None = Field(None, description="the corner's mean [unit]")
    std: float | None = Field(None, description="the corner's std [unit]")
    spec_yield: float | None = Field(None, description="the corner's spec yield [1]")
    tied: list[TiedCorner] | None = Field(
        None, description="corners within two combined standard errors of the margin, or with the same spread"
    )
    label: str | None = Field(None, description='the tied corners named together, e.g. "ss, -40 degC, any supply"')


# --------------------------------------------------------------------------------------------- area
class AreaPointMeasure(Block):
    """One measure at one area point."""

    nominal: float = Field(description="solve without mismatch [unit]")
    mean: float | None = Field(description="Monte Carlo mean [unit]")
    std: float | None = Field(description="Monte Carlo standard deviation [unit]")
    count: int = Field(description="converged samples")


class AreaPoint(Block):
    """One gate-area factor of the sweep; a point without an operating point carries `error` instead of statistics."""

    scale: float = Field(description="actual gate-area factor [1]")
    requested_scale: float = Field(description="factor asked for [1] (differs in units mode: m is rounded)")
    area: float = Field(description="summed gate area m W L of the scaled devices [m^2]")
    measures: dict[str, AreaPointMeasure] | None = Field(None, description="per measure")
    yield_: float | None = Field(None, alias="yield", description="joint pass fraction [1]")
    yield_ci95: list[float] | None = Field(None, description="its two-sided 95 % Clopper-Pearson interval [1]")
    samples: int | None = Field(None, description="Monte Carlo samples")
    failed_solves: int | None = Field(None, description="samples whose solve failed")
    error: str | None = Field(None, description="why the point has no operating point")
    compliance: Compliance | None = Field(None, description="saturation margin at this point")


class FloorTest(Block):
    """Whether the fit keeps a floor term."""

    delta_chi2: float | None = Field(description="chi-square gained by the floor [1]")
    threshold: float = Field(description="99 % point of chi-square(1) [1]")
    kept: bool = Field(description="floor kept")
    rule: str = Field(description="the rule in words")


class AreaFit(Block):
    """sigma(A) = sqrt(k^2 / A + floor^2) for one measure."""

    k: float | None = Field(description="Pelgrom coefficient [unit * m]")
    floor: float | None = Field(description="area-independent floor [unit]")
    slope: float | None = Field(None, description="free log-log slope of sigma against area [1]")
    floor_test: FloorTest | None = Field(None, description="the floor decision")
    falls_with_area: bool | None = Field(None, description="sigma falls with area (slope below -0.1)")
    flag: str | None = Field(None, description="present when sigma does not fall with area")
    note: str | None = Field(None, description="why no fit was made")


class AreaConfirmation(Block):
    """One fresh Monte Carlo run at the minimum area; on a failed nominal solve only the keys and `error`."""

    scale: float = Field(description="gate-area factor run [1]")
    area: float = Field(description="gate area [m^2]")
    requested_scale: float | None = Field(None, description="factor asked for [1] (error entries)")
    mean: float | None = Field(None, description="Monte Carlo mean [unit]")
    std: float | None = Field(None, description="Monte Carlo standard deviation [unit]")
    yield_: float | None = Field(None, alias="yield", description="spec yield [1]")
    ci95: list[float] | None = Field(None, description="its Clopper-Pearson 95 % interval [1]")
    samples: int | None = Field(None, description="Monte Carlo samples")
    failed_solves: int | None = Field(None, description="samples whose solve failed")
    random_stream: int | None = Field(None, description="random stream of the run (independent of the sweep)")
    error: str | None = Field(None, description="why the run has no operating point")


class AreaMinimum(Block):
    """The smallest area that meets one spec under the fitted normal model."""

    scale: float | None = Field(description="area factor against the present circuit [1]; null if none found")
    area: float | None = Field(description="gate area [m^2]; null if none found")
    std: float | None = Field(None, description="predicted sigma there [unit]")
    mean: float | None = Field(None, description="predicted mean there [unit]")
    yield_: float | None = Field(None, alias="yield", description="predicted yield there [1]")
    criterion: str = Field(description="the criterion in words")
    note: str | None = Field(None, description="e.g. met at the smallest area searched")
    reason: str | None = Field(None, description="why no area meets the spec")
    target_yield: float | None = Field(None, description="target yield used [1]")
    k_sigma: float | None = Field(None, description="k of mean +- k sigma, when configured [1]")
    confirmed: AreaConfirmation | None = Field(None, description="the confirming Monte Carlo run")


class AreaStudy(Block):
    """[analysis.area]: sigma against gate area."""

    mode: Literal["aspect", "units"] = Field(description="how the area is scaled")
    devices: list[str] = Field(description="scaled MOSFETs")
    base_area: float = Field(description="their summed gate area m W L as configured [m^2]")
    samples: int = Field(description="Monte Carlo samples per point")
    points: list[AreaPoint] = Field(description="one per area factor")
    fit: dict[str, AreaFit] = Field(description="per measure")
    minimum: dict[str, AreaMinimum] = Field(description="per spec'd measure")
    halving_cost: dict[str, float | None] = Field(description="area factor that halves sigma [1]; null: impossible")


# --------------------------------------------------------------------------------------------- contributions
class ContributionTerm(Block):
    """One device parameter's part of a measure's linearised variance."""

    device: str = Field(description="MOSFET")
    parameter: Literal["vth", "beta"] = Field(description="threshold deviation or dbeta/beta")
    sensitivity: float = Field(description="d(measure)/d(parameter) [unit/V for vth, unit for beta]")
    sigma: float = Field(description="the parameter's single-device sigma [V or 1]")
    std: float = Field(description="|sensitivity| x sigma [unit]")
    share: float = Field(description="part of the linearised variance [1]; a measure's shares sum to 1")


class TopTerm(Block):
    """One of the largest contributors."""

    device: str = Field(description="MOSFET")
    parameter: Literal["vth", "beta"] = Field(description="parameter")
    share: float = Field(description="part of the linearised variance [1]")


class Contribution(Block):
    """One measure's linearised mismatch budget."""

    linear_std: float | None = Field(description="sqrt of the linearised variance [unit]; null if not linearised")
    mc_std: float | None = Field(description="the main run's Monte Carlo sigma [unit]")
    mc_std_ci95: list[float] | None = Field(description="its 95 % chi-square interval [unit]")
    terms: list[ContributionTerm] = Field(description="every term, largest share first")
    top: list[TopTerm] = Field(description="the (up to) three largest")
    devices: dict[str, float] = Field(description="shares summed per device [1]")
    within_mc_ci95: bool | None = Field(None, description="linear_std inside mc_std_ci95")
    note: str | None = Field(None, description="no first-order dependence, or not linearised")


# --------------------------------------------------------------------------------------------- placements
class PlacementMeasure(Block):
    """One measure of one candidate."""

    nominal: float | None = Field(description="solve with the candidate's gradients, no mismatch [unit]")
    mean: float | None = Field(description="Monte Carlo mean [unit]")
    std: float | None = Field(description="Monte Carlo standard deviation [unit]")
    systematic: float | None = Field(description="nominal with gradients - nominal without [unit]")
    count: int = Field(description="converged samples")


class PlacementShift(Block):
    """A device's systematic shift from the gradients."""

    vth: float = Field(description="threshold shift [V]")
    beta: float = Field(description="relative current-factor shift [1]")


class PlacementLayout(Block):
    """The geometry the candidate was placed on."""

    pitch: list[float] = Field(description="cell pitch in x and y [m]")
    letters: dict[str, str] = Field(description="letter -> MOSFET")
    dummy: str = Field(description="dummy letter")
    origin: str = Field(description='"center" or "corner"')


class PlacementVersusBest(Block):
    """This candidate's joint yield minus the best candidate's, paired on the same samples."""

    best: str = Field(description="name of the best candidate")
    difference: float | None = Field(description="yield here minus yield of the best [1]")
    ci95: list[float] = Field(description="Newcombe paired score interval of the difference (95 %) [1]")
    only_this: int = Field(description="samples that pass here and fail with the best")
    only_other: int = Field(description="samples that pass with the best and fail here")
    samples: int = Field(description="paired samples")


class PlacementEntry(Block):
    """One [[placement.candidate]]."""

    name: str = Field(description="candidate name")
    rows: list[str] = Field(description="rows of cells, first at y = 0")
    centroids: dict[str, list[float]] = Field(description="centroid (x, y) per device [m]")
    cells: dict[str, int] = Field(description="cells per device")
    shifts: dict[str, PlacementShift] = Field(description="systematic shift per device")
    warnings: list[str] = Field(description="e.g. cell count differs from m")
    layout: PlacementLayout = Field(description="geometry")
    measures: dict[str, PlacementMeasure] | None = Field(None, description="per measure")
    yield_: YieldBlock | None = Field(None, alias="yield", description="joint yield")
    samples: int | None = Field(None, description="Monte Carlo samples")
    failed_solves: int | None = Field(None, description="samples whose solve failed")
    error: str | None = Field(None, description="no operating point with the gradients")
    versus_best: PlacementVersusBest | None = Field(None, description="paired yield difference to the best candidate")


# --------------------------------------------------------------------------------------------- high sigma
class HighSigmaSide(Block):
    """One side of a spec in the importance sampling."""

    side: Literal["min", "max"] = Field(description="which limit")
    limit: float = Field(description="the limit [unit]")
    linear_beta: float | None = Field(description="distance of the linearised failure point [sigma]")
    shift: float = Field(description="length of the sampling shift [sigma]")
    boundary_found: bool = Field(description="the search with real solves found the limit")


class HighSigma(Block):
    """Importance-sampling estimate of one spec's failure probability."""

    fail_probability: float = Field(description="probability of failing the spec, either side [1]")
    ci95: list[float] = Field(description="95 % interval (normal approximation) [1]")
    effective_samples: float = Field(description="Kish's count over the weighted failure terms [1]")
    sigma_level: float | None = Field(description="one-sided normal equivalent norm.isf(p) [sigma]")
    samples: int = Field(description="draws")
    shift: float = Field(description="smallest shift length [sigma]")
    method: str = Field(description='"importance"')
    std_error: float = Field(description="standard error of fail_probability [1]")
    failures: int = Field(description="failing draws")
    failed_solves: int = Field(description="draws whose solve failed (counted as failures)")
    weight_kish: float = Field(description="Kish's count over all weights [1]")
    linear_estimate: float | None = Field(description="first-order estimate sum Phi(-beta_lin) [1]")
    nominal: float | None = Field(description="nominal value of the measure [unit]")
    sides: list[HighSigmaSide] = Field(description="per spec side")
    failed_solves_count_as: str = Field(description="how failed solves count")
    sigma_level_at_least: float | None = Field(None, description="with no failing draw: from ci95's upper end")
    note: str | None = Field(None, description="how to read a bound")
    notes: list[str] | None = Field(None, description="search remarks")


# --------------------------------------------------------------------------------------------- bank
class ChannelYield(Block):
    """One channel of a bank."""

    measure: str = Field(description="channel measure")
    fraction: float = Field(description="pass fraction [1]")
    passed: int = Field(description="passing samples")


class BankStep(Block):
    """The die yield of the first k channels."""

    k: int = Field(description="channels counted")
    fraction: float | None = Field(description="all k in spec [1]")
    ci95: list[float] = Field(description="Clopper-Pearson 95 % interval [1]")
    passed: int = Field(description="passing samples")
    independent_estimate: float = Field(description="product of the k per-channel fractions [1]")


class WorstChannel(Block):
    """The channel with the lowest yield."""

    measure: str = Field(description="channel measure")
    fraction: float = Field(description="its pass fraction [1]")


class Bank(Block):
    """Die yield of a multi-output bank: every channel in spec at once."""

    channels: int = Field(description="K")
    measures: list[str] = Field(description="channel measures")
    samples: int = Field(description="Monte Carlo samples")
    all_in_spec: YieldBlock = Field(description="die yield")
    independent_estimate: float = Field(description="product of the per-channel fractions [1]")
    worst_channel: WorstChannel | None = Field(description="lowest channel")
    per_channel: list[ChannelYield] = Field(description="per channel")
    by_k: list[BankStep] = Field(description="k = 1..K")
    mean_correlation: float | None = Field(description="mean pairwise correlation of the channels [1]")
    failed_solves: int = Field(description="samples whose solve failed (fail every channel)")
    detected: str = Field(description="configured, or found from shared ratio references")
