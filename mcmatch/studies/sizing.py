"""[analysis.sizing]: the unit W and L of each device group for a joint-yield target under a headroom limit.

The search walks a log-spaced grid of W/L per group (refined twice around the smallest design that meets
everything). W/L sets the overdrive and so gm/I and the headroom; at a fixed W/L the area needed for the target
follows from the linearised model in closed form (:mod:`mcmatch.stats.sizing`), so each W/L needs a handful of
nominal solves instead of a one-dimensional search by Monte Carlo. A grid, not an optimiser: the cost is small and
predictable, every evaluated design is reported (the designer sees the whole trade-off, not one answer), and the
front is the set of W/L choices a designer actually picks from.

For each W/L: iterate the unit area at the nominal condition until the linear joint yield of all specs meets the
target (lambda_l moves the operating point with L, hence the iteration), evaluate every corner of
[analysis.corners] (yield and headroom), iterate again at the worst corner if it misses there. The smallest design
meeting the target, the headroom limit at every corner and max_area is chosen and confirmed by a full Monte Carlo
at its worst corner; if the Monte Carlo contradicts the target (its interval lies below it), the next design along
the front is confirmed, at most ``max_confirmations`` times.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from mcmatch.config.analysis import SizingStudy
from mcmatch.config.schema import Config, Netlist
from mcmatch.draws.mismatch import normal_source
from mcmatch.draws.process import PROCESS_DIMS
from mcmatch.errors import SolveError
from mcmatch.model.operating_point import device_operating_points
from mcmatch.model.sensitivity import measure_sensitivities, parameter_labels, parameter_sigmas
from mcmatch.run.study import nominal_measures, prepare
from mcmatch.stats import sizing as arith
from mcmatch.stats.corners import GridPoint, corner_grid
from mcmatch.stats.yields import joint_passes, yield_block
from mcmatch.studies.condition import condition_mc

#: Random streams of the linear-model draws (mismatch; LINEAR_STREAM + 1 the global draws) and of the confirming
#: Monte Carlo, apart from every other study's (main 0, area confirmation 2, high-sigma 7, placement 8; below the
#: global process stream's offset, 16).
LINEAR_STREAM = 9
CONFIRM_STREAM = 11
#: Draws of the linear model (scrambled Sobol' points): the area for a 0.9973 target to about 1 %.
LINEAR_DRAWS = 2**16
#: A design meets the linear target when at most this many draws' worth below it (rounding at the boundary).
YIELD_SLACK = 2.0 / LINEAR_DRAWS
#: Area iterations per condition, and the relative change that ends them.
ITERATIONS = 5
AREA_RTOL = 0.005
#: Grid refinements around the best design.
REFINEMENTS = 2


@dataclass(frozen=True)
class Point:
    """One design solved at one condition, linearised."""

    t_max: np.ndarray  # per draw, the largest deviation scale passing every spec [1]
    nominal: np.ndarray  # spec'd measures at the operating point [SI]
    std: np.ndarray  # their linear sigmas [SI]
    min_headroom: float  # [V]
    limiting_device: str
    out_of_saturation: list[str]
    vdsat: float  # of the first device of the first group [V]
    gm_over_id: float  # [1/V]


def default_groups(netlist: Netlist) -> dict[str, list[str]]:
    """The devices of one polarity form one group: they scale together, each keeping its drawn W and L relative to
    the group's first device (a wide-swing bias device stays 1/4 of the unit's W/L, a mirror's m keeps its ratio)."""
    groups: dict[str, list[str]] = {}
    for m in netlist.mosfet:
        groups.setdefault(m.type, []).append(m.name)
    names = ["unit"] if len(groups) == 1 else [f"unit{k}" for k in range(1, len(groups) + 1)]
    return dict(zip(names, groups.values(), strict=True))


def condition_label(point: GridPoint) -> str:
    label = f"{point.process}/{point.temperature - 273.15:.4g} degC"
    return label + (f"/{point.supply[1]:.4g} V" if point.supply else "")


class Evaluator:
    """Solves and linearises designs; the same linear draws for every design (common random numbers)."""

    def __init__(self, config: Config, groups: dict[str, list[str]]) -> None:
        self.config, self.groups = config, groups
        self.specs = list(config.specs)
        self.low = np.array([-np.inf if config.specs[n].min is None else config.specs[n].min for n in self.specs])
        self.high = np.array([np.inf if config.specs[n].max is None else config.specs[n].max for n in self.specs])
        nd = len(config.circuit.mosfet)
        self.z = normal_source(config.analysis.seed, 0, 2 * nd, LINEAR_STREAM, "sobol").take(LINEAR_DRAWS).T
        grouped = {name for names in groups.values() for name in names}
        labels = [m.name for m in config.circuit.mosfet] * 2  # vth of each device, then beta (parameter_labels)
        self.mask = np.array([device in grouped for device in labels])
        self.z_scaled = np.ascontiguousarray(self.z[:, self.mask])
        self.z_fixed = np.ascontiguousarray(self.z[:, ~self.mask])
        # the global (die-to-die) draws of variation "global" / "both": they do not scale with area
        self.z_global = normal_source(config.analysis.seed, 0, PROCESS_DIMS, LINEAR_STREAM + 1, "sobol")
        self.z_global = self.z_global.take(LINEAR_DRAWS).T
        self.guesses: dict[str, np.ndarray] = {}
        self.solves = 0

    def netlist(self, aspects: tuple[float, ...], area: float) -> Netlist:
        """The circuit with each group's first device at W/L `aspect` and W L `area` [m^2]; every other member keeps
        its drawn W and L relative to that first device."""
        drawn = {m.name: (m.w, m.l) for m in self.config.circuit.mosfet}
        sizes = {}
        for aspect, names in zip(aspects, self.groups.values(), strict=True):
            w, l = arith.width_length(aspect, area)  # noqa: E741
            w0, l0 = drawn[names[0]]
            sizes.update({name: (w * drawn[name][0] / w0, l * drawn[name][1] / l0) for name in names})
        devices = [
            m.model_copy(update={"w": sizes[m.name][0], "l": sizes[m.name][1]}) if m.name in sizes else m
            for m in self.config.circuit.mosfet
        ]
        return self.config.circuit.model_copy(update={"mosfet": devices})

    def at(self, netlist: Netlist, condition: GridPoint) -> Point:
        label = condition_label(condition)
        study = prepare(
            self.config.with_circuit(netlist),
            corner=condition.process,
            temperature=condition.temperature,
            supply=condition.supply,
            guess=self.guesses.get(label),
        )
        self.solves += 1
        self.guesses[label] = study.x_nominal
        circuit = study.circuit
        nominal = nominal_measures(study)
        grads = measure_sensitivities(circuit, {n: self.config.measures[n] for n in self.specs}, study.x_nominal)
        missing = [n for n in self.specs if grads[n] is None]
        if missing:
            raise SolveError(f"measure '{missing[0]}' has no sensitivity at the operating point (zero denominator)")
        raw = np.array([grads[n] for n in self.specs])  # d(measure)/d(parameter) (specs, params)
        gain = raw * parameter_sigmas(circuit)[None, :]  # per unit local normal [SI]
        spread = study.variation  # None for variation "local"
        if spread is not None and not spread.local:
            gain = np.zeros_like(gain)  # "global" alone: no per-device mismatch
        if [d for d, _ in parameter_labels(circuit)] != [m.name for m in self.config.circuit.mosfet] * 2:
            raise AssertionError("parameter axis order differs from the netlist's")  # the masks above rely on it
        scaled = self.z_scaled @ gain[:, self.mask].T
        fixed = self.z_fixed @ gain[:, ~self.mask].T if (~self.mask).any() else None
        variance = (gain**2).sum(axis=1)
        if spread is not None:
            shared = raw @ spread.loading  # (specs, 4): every device of a polarity moves alike
            moved = self.z_global @ shared.T
            fixed = moved if fixed is None else fixed + moved
            variance = variance + (shared**2).sum(axis=1)
        m0 = np.array([nominal[n] for n in self.specs])
        ops = device_operating_points(circuit, study.x_nominal)
        headroom = {op["name"]: op["headroom"] for op in ops if op.get("headroom") is not None}
        limiting = min(headroom, key=headroom.get) if headroom else ""
        first = next(iter(self.groups.values()))[0]
        op = next(o for o in ops if o["name"] == first)
        return Point(
            t_max=arith.largest_passing_scale(m0, scaled, fixed, self.low, self.high),
            nominal=m0,
            std=np.sqrt(variance),
            min_headroom=float(headroom[limiting]) if limiting else math.inf,
            limiting_device=limiting,
            out_of_saturation=[n for n, h in headroom.items() if h < 0],
            vdsat=float(op.get("vdsat") or math.nan),
            gm_over_id=float(op.get("gm_id") or math.nan),
        )


def _iterate(ev: Evaluator, aspects: tuple, area: float, bounds: tuple, condition: GridPoint, target: float) -> float:
    """Unit area [m^2] meeting the linear target at `condition`, clipped to `bounds`."""
    for _ in range(ITERATIONS):
        point = ev.at(ev.netlist(aspects, area), condition)
        need = arith.required_area(point.t_max, area, target)
        new = min(max(need, bounds[0]), bounds[1])
        done = abs(new / area - 1.0) < AREA_RTOL
        area = new
        if done or new in bounds:
            break
    return area


def size_design(ev: Evaluator, aspects: tuple, conditions: list[GridPoint], target: float, sizing: SizingStudy):
    """The smallest unit area meeting the target at every condition for these W/L ratios, described; None when the
    W and L ranges leave no area at these ratios."""
    w, l = tuple(sizing.w), tuple(sizing.l)  # noqa: E741
    ranges = [arith.area_range(a, w, l) for a in aspects]
    bounds = (max(r[0] for r in ranges), min(r[1] for r in ranges))
    if bounds[0] > bounds[1]:
        return None
    area = _iterate(ev, aspects, math.sqrt(bounds[0] * bounds[1]), bounds, conditions[0], target)
    first = ev.at(ev.netlist(aspects, area), conditions[0])
    if arith.required_area(first.t_max, area, target) > area * (1 + AREA_RTOL):  # short already at the nominal
        return describe_design(ev, aspects, area, {condition_label(conditions[0]): first}, target, sizing)
    points = {condition_label(c): ev.at(ev.netlist(aspects, area), c) for c in conditions}
    need = {k: arith.required_area(p.t_max, area, target) for k, p in points.items()}
    worst = max(need, key=need.get)
    if need[worst] > area * (1 + AREA_RTOL) and area < bounds[1]:
        area = _iterate(ev, aspects, min(need[worst], bounds[1]), bounds, conditions[list(points).index(worst)], target)
        points = {condition_label(c): ev.at(ev.netlist(aspects, area), c) for c in conditions}
    return describe_design(ev, aspects, area, points, target, sizing)


def describe_design(ev: Evaluator, aspects: tuple, area: float, points: dict[str, Point], target: float, sizing):
    """The summary entry of one design (SI units)."""
    yields = {k: arith.linear_yield(p.t_max) for k, p in points.items()}
    yield_corner = min(yields, key=yields.get)
    head_corner = min(points, key=lambda k: points[k].min_headroom)
    nominal = next(iter(points.values()))
    netlist = ev.netlist(aspects, area) if aspects else ev.config.circuit
    total = float(sum(m.area for m in netlist.mosfet))
    devices = {m.name: m for m in netlist.mosfet}
    groups = {}
    for name, members in ev.groups.items():
        first = devices[members[0]]
        groups[name] = {"w": first.w, "l": first.l, "aspect": first.w / first.l}
    margins = {k: arith.sigma_margin(p.nominal, p.std, ev.low, ev.high) for k, p in points.items()}
    head = points[head_corner]
    meets = {
        "yield": yields[yield_corner] >= target - YIELD_SLACK,
        "headroom": head.min_headroom >= sizing.min_headroom,
        "max_area": sizing.max_area is None or total <= sizing.max_area,
    }
    return {
        "groups": groups,
        "unit_area": area,
        "area": total,
        "sigma": {n: float(s) for n, s in zip(ev.specs, nominal.std, strict=True)},
        "linear_yield": yields[yield_corner],
        "linear_yield_corner": yield_corner,
        "margin_sigma": min(margins.values()),
        "min_headroom": head.min_headroom,
        "headroom_corner": head_corner,
        "limiting_device": head.limiting_device,
        "devices_out_of_saturation": sorted({d for p in points.values() for d in p.out_of_saturation}),
        "vdsat": nominal.vdsat,
        "gm_over_id": nominal.gm_over_id,
        "meets": meets,
        "feasible": all(meets.values()),
        "conditions_evaluated": len(points),
    }


def _grid(sizing: SizingStudy, groups: int) -> list[np.ndarray]:
    per_group = max(3, round(sizing.aspects ** (1.0 / groups)))
    return [arith.aspect_grid(tuple(sizing.w), tuple(sizing.l), per_group) for _ in range(groups)]


def _neighbours(best: tuple, tried: list[set[float]]) -> list[tuple]:
    """Geometric midpoints between the best design's W/L and its nearest tried neighbours, per group axis."""
    out = []
    for axis, value in enumerate(best):
        values = sorted(tried[axis])
        k = values.index(value)
        for other in (values[k - 1] if k > 0 else None, values[k + 1] if k + 1 < len(values) else None):
            if other is not None:
                out.append(best[:axis] + (math.sqrt(value * other),) + best[axis + 1 :])
    return out


def conditions_of(config: Config) -> list[GridPoint]:
    """The nominal condition first, then every corner of [analysis.corners]."""
    nominal = GridPoint("tt", config.temperature, None)
    return [nominal, *corner_grid(config)]


def search(config: Config, ev: Evaluator, conditions: list[GridPoint]) -> tuple[list[dict], list[tuple]]:
    """Every evaluated design and its W/L ratios: the grid, then refinements around the smallest feasible one."""
    sizing, target = config.analysis.sizing, config.analysis.target.yield_
    axes = _grid(sizing, len(ev.groups))
    todo = [
        tuple(float(a) for a in combo) for combo in np.array(np.meshgrid(*axes, indexing="ij")).reshape(len(axes), -1).T
    ]
    designs: list[dict] = []
    ratios: list[tuple] = []
    tried: list[set[float]] = [set() for _ in axes]
    for refinement in range(REFINEMENTS + 1):
        for aspects in todo:
            if aspects in ratios:
                continue
            try:
                design = size_design(ev, aspects, conditions, target, sizing)
            except SolveError as exc:
                design = {
                    "groups": {g: {"aspect": a} for g, a in zip(ev.groups, aspects, strict=True)},
                    "error": exc.message,
                    "feasible": False,
                }
            if design is None:
                continue
            designs.append(design)
            ratios.append(aspects)
            for axis, a in enumerate(aspects):
                tried[axis].add(a)
        feasible = [i for i, d in enumerate(designs) if d["feasible"]]
        if not feasible or refinement == REFINEMENTS:
            break
        best = ratios[min(feasible, key=lambda i: designs[i]["area"])]
        todo = _neighbours(best, tried)
    return designs, ratios


def confirm(config: Config, ev: Evaluator, design: dict, aspects: tuple, conditions, options: Any) -> dict:
    """Full Monte Carlo of a design at its worst-yield condition: joint yield of all specs with its interval."""
    sizing = config.analysis.sizing
    condition = next(c for c in conditions if condition_label(c) == design["linear_yield_corner"])
    study = prepare(
        config.with_circuit(ev.netlist(aspects, design["unit_area"])),
        corner=condition.process,
        temperature=condition.temperature,
        supply=condition.supply,
        stream=CONFIRM_STREAM,
    )
    columns = condition_mc(study, sizing.samples, options)
    failed = int((~np.asarray(columns["converged"], dtype=bool)).sum())
    ok = joint_passes(columns, config.specs)
    block = yield_block(int(ok.sum()), int(ok.size), config.analysis.target.confidence)
    return {
        "yield": block["fraction"],
        "ci95": block["ci95"],
        "samples": int(ok.size),
        "failed_solves": failed,
        "corner": design["linear_yield_corner"],
        "random_stream": CONFIRM_STREAM,
        "consistent": bool(block["ci95"][1] >= config.analysis.target.yield_),
    }


def infeasible_reason(designs: list[dict], sizing: SizingStudy) -> str:
    good = [d for d in designs if "error" not in d]
    if not good:
        return f"no design could be solved ({designs[0]['error'] if designs else 'no W/L inside the ranges'})"
    if not any(d["meets"]["headroom"] for d in good):
        d = max(good, key=lambda d: d["min_headroom"])
        return (
            f"headroom: the best design reaches {d['min_headroom'] * 1e3:.3g} mV at {d['headroom_corner']} "
            f"({d['limiting_device']}), below min_headroom {sizing.min_headroom * 1e3:.3g} mV"
        )
    fine = [d for d in good if d["meets"]["headroom"] and d["meets"]["yield"]]
    if fine:
        d = min(fine, key=lambda d: d["area"])
        return (
            f"the smallest design meeting the target and the headroom needs {d['area'] * 1e12:.4g} um^2, "
            f"above max_area {sizing.max_area * 1e12:.4g} um^2"
        )
    d = max(good, key=lambda d: d["linear_yield"])
    return (
        f"the W and L ranges cannot reach the target: the best design reaches a linear yield of "
        f"{d['linear_yield']:.5f} at {d['linear_yield_corner']}"
    )


def run_sizing(config: Config, options: Any = None) -> dict:
    """summary["sizing"]: every evaluated design, the Pareto front, the chosen design and its confirmation."""
    sizing = config.analysis.sizing
    groups = dict(sizing.groups) if sizing.groups else default_groups(config.circuit)
    ev = Evaluator(config, groups)
    conditions = conditions_of(config)
    designs, ratios = search(config, ev, conditions)
    full = len(conditions)  # designs short already at the nominal condition were not taken to every corner
    good = [i for i, d in enumerate(designs) if "error" not in d and d["conditions_evaluated"] == full]
    front = (
        [
            good[k]
            for k in arith.pareto_front(
                np.array([designs[i]["area"] for i in good]),
                np.array([designs[i]["margin_sigma"] for i in good]),
                np.array([designs[i]["min_headroom"] for i in good]),
            )
        ]
        if good
        else []
    )
    out: dict = {
        "groups": groups,
        "target": {"yield": config.analysis.target.yield_, "confidence": config.analysis.target.confidence},
        "min_headroom": sizing.min_headroom,
        "max_area": sizing.max_area,
        "conditions": [condition_label(c) for c in conditions],
        "method": "W/L grid refined near the best design; area per W/L from the linearised joint yield "
        f"({LINEAR_DRAWS} scrambled Sobol' draws); confirmed by Monte Carlo at the worst corner",
        "designs": designs,
        "pareto": front,
        "solves": ev.solves,
    }
    try:  # the design as drawn, for comparison
        present = {condition_label(c): ev.at(config.circuit, c) for c in conditions}
        out["present"] = describe_design(ev, (), math.nan, present, config.analysis.target.yield_, sizing)
    except SolveError as exc:
        out["present"] = {"error": exc.message}
    candidates = sorted((i for i, d in enumerate(designs) if d["feasible"]), key=lambda i: designs[i]["area"])
    if not candidates:
        out["infeasible"] = infeasible_reason(designs, sizing)
        return out
    attempts = []
    for i in candidates[: sizing.max_confirmations]:
        confirmed = confirm(config, ev, designs[i], ratios[i], conditions, options)
        attempts.append({"index": i, **confirmed})
        if confirmed["consistent"]:
            out["chosen"] = {"index": i, "confirmed": confirmed, "confirmations": len(attempts)}
            break
    out["attempts"] = attempts
    if "chosen" not in out:
        out["infeasible"] = (
            f"the Monte Carlo contradicted the linear model for the {len(attempts)} smallest designs "
            f"(best {max(a['yield'] for a in attempts):.5f} against the target {config.analysis.target.yield_})"
        )
    return out
