"""Yield against the specs, process capability, and the failed solves."""

from __future__ import annotations

from collections.abc import Mapping
from statistics import NormalDist

from mcmatch.report.format import (
    finite,
    fixed,
    limits_text,
    percent,
    plain,
    sigma_equivalent,
    yield_cells,
    yield_text,
)
from mcmatch.report.tables import cell, num, row, status_cell, table
from mcmatch.report.targets import judge, spec_unit, target_of

#: Failed-solve examples listed, at most.
MAX_EXAMPLES = 5


def yield_section(summary: dict) -> dict | None:
    y = summary.get("yield") or {}
    specs = summary.get("specs") or {}
    if not y or not specs:
        return None
    target = target_of(summary)
    t = float(target["yield"])
    measures = summary.get("measures") or {}
    rows = []
    joint_status = judge(y, t, target.get("lower_bound"))
    if isinstance(target.get("met"), bool):
        joint_status = "pass" if target["met"] else ("fail" if joint_status == "fail" else "marginal")
    tail = finite(y.get("gaussian_tail_estimate"))
    rows.append(
        row(
            [
                cell("all specs jointly", "name"),
                "",
                num(f"{y.get('passed', 0):,} / {y.get('total', 0):,}"),
                *(num(text) for text in yield_cells(y)),
                num("\u2013"),
                num("\u2013"),
                num(normal_fit_text(tail)),
                status_cell(joint_status),
            ],
            "joint",
        )
    )
    for name, block in (y.get("specs") or {}).items():
        unit = spec_unit(summary, name)
        lim = specs.get(name, block)
        m = measures.get(name, {})
        cp, cpk = block.get("cp"), block.get("cpk")
        if cpk is None and "cpk" not in block:  # an older summary: derive them from mean and sigma
            cp, cpk = _capability(m.get("mean"), m.get("std"), lim)
        tail = block.get("gaussian_tail_estimate")
        if tail is None and "gaussian_tail_estimate" not in block:
            tail = _tail(m.get("mean"), m.get("std"), lim)
        rows.append(
            row(
                [
                    cell(name, "name"),
                    num(limits_text(lim, unit)),
                    num(f"{block.get('passed', 0):,} / {block.get('total', 0):,}"),
                    *(num(text) for text in yield_cells(block)),
                    num(plain(cp, 3)),
                    num(plain(cpk, 3)),
                    num(normal_fit_text(tail)),
                    status_cell(judge(block, t)),
                ]
            )
        )
    notes = []
    needed = target.get("samples_needed")
    if needed is None:
        from mcmatch.stats.yields import samples_needed

        needed = samples_needed(t, float(target.get("confidence") or 0.95))
    total = int(y.get("total") or 0)
    notes.append(
        f"Target {yield_text(t)} ({sigma_equivalent(t)}) at {percent(target.get('confidence'), 3)} confidence"
        + ("" if target["given"] else " (no target in the summary: the \u00b13 sigma reference is used)")
        + f". Demonstrating it needs at least {int(needed):,} samples with zero failures; this run has {total:,}."
    )
    if target.get("lower_bound") is not None:
        notes.append(
            f"One-sided {percent(target.get('confidence'), 3)} lower bound on the joint yield: "
            f"{yield_text(target['lower_bound'])} ({target.get('method', 'Clopper-Pearson')})."
        )
    zf = y.get("zero_failures")
    if isinstance(zf, Mapping):
        notes.append(
            f"No sample failed: the failure fraction is below {percent(zf.get('failure_upper_bound'), 3)} "
            f"(95 %, two-sided Clopper-Pearson); rule of three {percent(zf.get('rule_of_three'), 3)}."
        )
    notes.append(
        "Intervals: two-sided 95 % Clopper-Pearson on the counted yield. Cp, Cpk and the normal-fit yield assume a "
        "normal distribution with the sample mean and sigma; the counted yield does not."
    )
    return {
        "table": table(
            [
                "spec",
                ("limits", "num"),
                ("passed / samples", "num"),
                ("yield", "num"),
                ("95 % interval", "num"),
                ("Cp", "num"),
                ("Cpk", "num"),
                ("normal-fit yield", "num"),
                "status",
            ],
            rows,
            "Yield against the specs (failed solves count as failures)",
        ),
        "notes": notes,
    }


def _capability(mean: object, std: object, lim: Mapping) -> tuple[float | None, float | None]:
    mu, sd = finite(mean), finite(std)
    if mu is None or not sd:
        return None, None
    lo, hi = lim.get("min"), lim.get("max")
    cp = (hi - lo) / (6 * sd) if lo is not None and hi is not None else None
    sides = [(hi - mu) / (3 * sd)] if hi is not None else []
    sides += [(mu - lo) / (3 * sd)] if lo is not None else []
    return cp, (min(sides) if sides else None)


def _tail(mean: object, std: object, lim: Mapping) -> float | None:
    mu, sd = finite(mean), finite(std)
    if mu is None or not sd:
        return None
    normal = NormalDist(mu, sd)
    p = 1.0 - normal.cdf(lim["max"]) if lim.get("max") is not None else 0.0
    p += normal.cdf(lim["min"]) if lim.get("min") is not None else 0.0
    return float(p)


def failed_section(summary: dict) -> dict | None:
    failed = int(summary.get("failed_solves") or 0)
    if not failed:
        return None
    examples = [e for e in summary.get("failed_examples") or [] if isinstance(e, Mapping)][:MAX_EXAMPLES]
    tab = None
    if examples:
        keys = list(examples[0])
        columns: list[str | tuple[str, str]] = []
        for k in keys:
            columns.append((k.replace("dvth_", "\u0394vth ").replace("dbeta_", "\u0394\u03b2/\u03b2 "), "num"))
        rows = []
        for e in examples:
            cells = []
            for k in keys:
                v = e.get(k)
                if k.startswith("dvth_"):
                    cells.append(num(fixed(v, 1e3, "mV", 4)))
                elif k.startswith("dbeta_"):
                    cells.append(num(fixed(v, 1e2, "%", 4)))
                else:
                    cells.append(num(str(v)))
            rows.append(row(cells))
        tab = table(
            columns,
            rows,
            "Mismatch draws of the first failed samples (re-run with the same seed to reproduce)",
            "compact",
        )
    total = int(summary.get("samples") or 0)
    return {
        "count": f"{failed:,}",
        "total": f"{total:,}",
        "fraction": percent(failed / total, 3) if total else "\u2013",
        "table": tab,
    }


def normal_fit_text(tail: object) -> str:
    """The normal-fit yield from its tail probability: 0.0165 -> "98.35 %"; a tail below 1e-6 as "1 − 3.2e-09"
    (and "1 − <1e-300" when it underflows), never "100.0 %"."""
    t = finite(tail)
    if t is None:
        return "\u2013"
    if t < 1e-6:
        return f"1 \u2212 {t:.2g}" if t > 0 else "1 \u2212 <1e-300"
    return yield_text(1.0 - t)
