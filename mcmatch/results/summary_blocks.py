"""Blocks of summary.json written by the main Monte Carlo run: measure statistics, yields, sampling error, streaming,
operating point, run provenance. Every number is SI; the unit of a measure's value is the measure's own ``unit``.

Every block allows keys it does not declare (``extra="allow"``): the file contract only ever adds keys (DESIGN.md
section 3), so a summary written by a later mcmatch still loads, and a block another study extends stays valid.
Types are strict (no "3" for 3, no 1.5 for an integer count), so a wrong type fails where the summary is made.
"""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field


class Block(BaseModel):
    """Base of every summary block: strict types, undeclared keys kept."""

    model_config = ConfigDict(extra="allow", strict=True, populate_by_name=True)


# --------------------------------------------------------------------------------------------- measures
class MeasureStats(Block):
    """One measure over the main run's converged samples."""

    unit: str = Field(description='SI unit of the measure\'s values: "A", "V", "ohm", or "1" for a fraction')
    kind: str = Field(description='what is measured: "current", "voltage", "ratio", "resistance", ...')
    definition: dict[str, Any] | None = Field(
        default=None,
        description='the measure\'s table as given or as its template set it, e.g. {"ratio": ["MOUT1", "IREF"], '
        '"ideal": 2}',
    )
    nominal: float = Field(description="value with no mismatch at the nominal corner [unit]")
    count: int = Field(description="converged samples behind the statistics")
    mean: float | None = Field(description="sample mean [unit]; null when no sample converged")
    std: float | None = Field(description="sample standard deviation, ddof = 1 [unit]")
    min: float | None = Field(description="smallest value [unit]")
    max: float | None = Field(description="largest value [unit]")
    quantiles: dict[str, float | None] = Field(
        description='quantiles at -3..+3 sigma of a normal, keyed "0.00135", "0.02275", ... "0.99865" [unit]'
    )
    quantile_method: str = Field(description='"exact" (from every sample), "histogram" (streamed) or "none"')
    quantile_bin_width: float | None = Field(description="histogram bin width when streamed, else null [unit]")


# --------------------------------------------------------------------------------------------- yields
class YieldBlock(Block):
    """A pass count with its confidence intervals."""

    passed: int = Field(description="samples inside every limit considered (failed solves never pass)")
    total: int = Field(description="samples, failed solves included")
    fraction: float | None = Field(description="passed / total [1]; null when total is 0")
    ci95: list[float] = Field(description="two-sided 95 % Clopper-Pearson interval on the pass fraction [1]")
    method: str = Field(description='interval method of ci95: "clopper-pearson"')
    wilson95: list[float] = Field(description="two-sided 95 % Wilson score interval [1]")


class ZeroFailures(Block):
    """Bounds given when no sample failed."""

    failure_upper_bound: float = Field(description="two-sided 95 % Clopper-Pearson upper bound on failures [1]")
    rule_of_three: float = Field(description="3 / N, the approximate one-sided 95 % upper bound [1]")
    note: str | None = Field(None, description="how to read the bounds (per spec only)")


class SpecYield(YieldBlock):
    """The main run's yield against one spec, with capability figures."""

    min: float | None = Field(description="lower limit [unit of the measure]; null: none")
    max: float | None = Field(description="upper limit [unit of the measure]; null: none")
    cp: float | None = Field(description="(max - min) / (6 std) [1]; two-sided specs only")
    cpk: float | None = Field(description="distance of the mean to the nearer limit / (3 std) [1]")
    failed: int = Field(description="samples outside this spec, failed solves included")
    failure_upper_bound: float = Field(description="upper end of the 95 % Clopper-Pearson interval on failures [1]")
    gaussian_tail_estimate: float | None = Field(
        description="probability outside the limits of a normal with the sample mean and std [1]; an estimate"
    )
    zero_failures: ZeroFailures | None = Field(None, description="present when no sample failed this spec")


class Target(Block):
    """Whether the run demonstrates the target yield at the target confidence."""

    yield_: float = Field(alias="yield", description="target joint yield [1]")
    confidence: float = Field(description="confidence of the demonstration [1]")
    samples_needed: int = Field(description="zero-failure samples that demonstrate the target: ln(1 - C) / ln(Y)")
    lower_bound: float = Field(description="one-sided Clopper-Pearson lower bound on the joint yield [1]")
    met: bool = Field(description="lower_bound >= target yield")
    method: str = Field(description="how lower_bound is computed")


class MainYield(YieldBlock):
    """The joint yield of the main run against every spec."""

    specs: dict[str, SpecYield] = Field(description="per spec'd measure: its own yield")
    failure_upper_bound: float | None = Field(None, description="1 - lower end of ci95 [1]")
    zero_failures: ZeroFailures | None = Field(None, description="present when no sample failed")
    gaussian_tail_estimate: float | None = Field(
        None, description="sum of the specs' normal-tail estimates (an upper estimate for several specs) [1]"
    )
    target: Target = Field(description="the target check of [analysis.target]")


# --------------------------------------------------------------------------------------------- sampling error
class SamplingMeasure(Block):
    """Standard errors of one measure's sigma and mean."""

    std: float | None = Field(description="the run's sigma [unit]")
    std_error: float | None = Field(description="standard error of std [unit]")
    relative_std_error: float | None = Field(description="std_error / std [1]")
    mean: float | None = Field(description="the run's mean [unit]")
    mean_error: float | None = Field(description="standard error of the mean [unit]")
    mc_std_error: float | None = Field(description="plain Monte Carlo formula sigma / sqrt(2(N - 1)) [unit]")
    mc_mean_error: float | None = Field(description="plain Monte Carlo formula sigma / sqrt(N) [unit]")
    sample_ratio: float | None = Field(description="(mc_std_error / std_error)^2 for sobol, else null [1]")
    replicate_std: list[float | None] = Field(description="sigma of each Sobol' scrambling (empty for random) [unit]")


class SamplingYield(Block):
    """Standard error of the joint yield fraction."""

    fraction: float | None = Field(description="joint pass fraction [1]")
    std_error: float | None = Field(description="its standard error [1]")
    mc_std_error: float | None = Field(description="plain Monte Carlo formula sqrt(p(1 - p) / N) [1]")
    sample_ratio: float | None = Field(description="(mc_std_error / std_error)^2 for sobol, else null [1]")
    replicate_fraction: list[float | None] = Field(description="pass fraction of each scrambling [1]")


class Sampling(Block):
    """How the mismatch was drawn and how precise the estimates are."""

    method: Literal["random", "sobol"] = Field(description="[analysis] sampling")
    scramblings: int | None = Field(description="independent Sobol' scramblings (null for random)")
    points_per_scrambling: int | None = Field(description="samples per scrambling (null for random)")
    balanced: bool | None = Field(description="equal shares of a power of 2 per scrambling (null for random)")
    error_estimate: str = Field(description="how the standard errors were obtained")
    measures: dict[str, SamplingMeasure] = Field(description="per measure")
    yield_: SamplingYield = Field(alias="yield", description="joint yield")
    warnings: list[str] = Field(description="why the error may be larger than it could be")


class StreamStatistics(Block):
    """How the statistics were gathered over the streamed chunks."""

    streamed: bool = Field(description="statistics folded chunk by chunk")
    chunks: int = Field(description="chunks solved")
    stat_block: int = Field(description="samples per block of the moment folding")
    keep_samples: int = Field(description="sample rows kept at most (analysis.keep_samples)")
    kept_samples: int = Field(description="sample rows in the table")
    quantiles: str = Field(description='"exact" or "histogram"')
    histogram_bins: int | None = Field(description="bins of the quantile histogram (null when exact)")
    retried_solves: int = Field(description="samples solved again on the robust path")


# --------------------------------------------------------------------------------------------- operating point
class NominalNodes(Block):
    """The nominal solution."""

    nodes: dict[str, float] = Field(description="node voltage to gnd [V]")


class DeviceOperatingPoint(Block):
    """One MOSFET at the nominal point (magnitudes for pmos)."""

    name: str = Field(description="device name")
    type: Literal["nmos", "pmos"] = Field(description="polarity")
    model: str = Field(description='"square-law" or "ekv"')
    drain: str = Field(description="drain node")
    gate: str = Field(description="gate node")
    source: str = Field(description="source node")
    bulk: str = Field(description="bulk node")
    diode_connected: bool = Field(description="drain tied to gate")
    reversed: bool = Field(description="conducting with drain and source swapped")
    region: str = Field(description='"cutoff", "triode" or "saturation"')
    inversion: str = Field(description='"weak", "moderate" or "strong"')
    ic: float = Field(description="inversion coefficient I / (2 n beta U_T^2) [1]")
    vgs: float = Field(description="gate-source voltage [V]")
    vds: float = Field(description="drain-source voltage [V]")
    vsb: float = Field(description="source-bulk voltage [V]")
    vth: float = Field(description="threshold with body effect [V]")
    vov: float = Field(description="overdrive vgs - vth [V]")
    vdsat: float = Field(description="saturation voltage of the device's model [V]")
    headroom: float = Field(description="vds - vdsat [V]")
    id: float = Field(description="channel current [A]")
    gm: float = Field(description="transconductance [S]")
    gds: float = Field(description="output conductance [S]")
    gmb: float = Field(description="body transconductance [S]")
    gm_id: float | None = Field(description="gm / id [1/V]; null where the current is zero")


class Conditions(Block):
    """The main run's condition."""

    corner: str = Field(description='global process corner ("tt")')
    temperature: float = Field(description="temperature [K]")


class SpecLimits(Block):
    """One spec as configured."""

    min: float | None = Field(description="lower limit [unit]")
    max: float | None = Field(description="upper limit [unit]")
    unit: str = Field(description="unit of the measure")


class RunInfo(Block):
    """Provenance of the run."""

    mcmatch_version: str = Field(description="version that wrote the summary")
    config: str = Field(description="config file as given")
    config_digest: str = Field(description="sha256 of the config and technology texts")
    technology: str = Field(description="technology name")
    started_utc: str = Field(description="start time, ISO 8601, UTC")
    python: str = Field(description="Python version")
    machine: str = Field(description="system, architecture and host name")
    run_time_s: float = Field(description="time of the whole study [s]")
    command_time_s: float | None = Field(
        None,
        description="the whole command from its process start (interpreter and imports included) to the results "
        "written, the report's own rendering excluded [s]; absent when the study ran from Python",
    )
    monte_carlo_time_s: float | None = Field(
        None,
        description="wall time of the main condition's Monte Carlo: the pilot chunk, then every other chunk solved, "
        "reduced and folded [s]; samples / monte_carlo_time_s is the run's throughput",
    )
    workers: int | None = Field(
        None,
        description="processes that solved the main Monte Carlo's chunks after the pilot (1: this process; with a "
        "cluster, the chunks in flight)",
    )
    warm: bool | None = Field(
        None,
        description="true for a re-run in 'mcmatch watch': command_time_s then counts from the saved change, in a "
        "process whose imports were already done",
    )
