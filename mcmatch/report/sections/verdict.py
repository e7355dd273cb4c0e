"""The verdict box and the header: status in words, the joint yield, findings per spec and corner."""

from __future__ import annotations

from datetime import datetime

from mcmatch.report.format import (
    celsius,
    eng,
    finite,
    interval_text,
    limits_text,
    percent,
    sigma_equivalent,
    yield_text,
    zero_failure_text,
)
from mcmatch.report.sections.measures import sampling_text
from mcmatch.report.sections.scope import scope_lines
from mcmatch.report.tables import STATUS
from mcmatch.report.targets import corner_label, judge, spec_unit, target_of, worst_indices

#: Specs of one status listed one by one in the verdict; more are summed up in one line.
MAX_FINDINGS = 3


def verdict_section(summary: dict, key_measures: list[str]) -> dict:
    y = summary.get("yield") or {}
    target = target_of(summary)
    specs = summary.get("specs") or {}
    target_yield = float(target["yield"])
    status = judge(y, target_yield, target.get("lower_bound")) if y else "marginal"
    if isinstance(target.get("met"), bool):
        status = "pass" if target["met"] else ("fail" if status == "fail" else "marginal")
    findings = []
    failing: list[str] = []
    fails: list[tuple] = []
    marginals: list[tuple] = []
    outside: dict[tuple[str, str], list[str]] = {}  # (nominal, spec) texts -> measures, said once per pair
    for name, block in (y.get("specs") or {}).items():
        s = judge(block, target_yield)
        unit = spec_unit(summary, name)
        nominal = summary.get("measures", {}).get(name, {}).get("nominal")
        lim = specs.get(name, block)
        outside_nominal = nominal is not None and (
            (lim.get("min") is not None and nominal < lim["min"])
            or (lim.get("max") is not None and nominal > lim["max"])
        )
        if outside_nominal:
            outside.setdefault((eng(nominal, unit), limits_text(lim, unit)), []).append(name)
        if s == "fail":
            failing.append(name)
            fails.append((name, block, lim, unit))
        elif s == "marginal":
            marginals.append((name, block, lim, unit))
    for (nominal_text, spec_text), names in outside.items():
        findings.append(
            {
                "word": "FAILS",
                "cls": "status-fail",
                "text": f"{_names(names)}: the nominal value {nominal_text} is outside the spec {spec_text} "
                "before any mismatch.",
            }
        )
    findings += _spec_findings(fails, "FAILS", "status-fail", "is below", target_yield)
    findings += _spec_findings(marginals, "NOT DEMONSTRATED", "status-marginal", "does not settle", target_yield)
    corners = summary.get("corners") or []
    worst = worst_indices(summary)
    corner_lines = []
    for name, i in worst.items():
        if name not in key_measures:
            continue
        c = corners[i]
        w = summary["corners_worst"][name]
        block = (c.get("yield") or {}).get("specs", {}).get(name)
        if block is not None and name in specs:
            frac = block.get("fraction")
            word, cls = (
                ("FAILS", "status-fail") if frac is not None and frac < target_yield else ("meets", "status-pass")
            )
            corner_lines.append(
                {
                    "word": word,
                    "cls": cls,
                    "text": f"{name}: worst corner {corner_label(c)} with spec yield "
                    f"{yield_text(frac)} ({c.get('samples', '?')} samples).",
                    "rank": frac if frac is not None else 0.0,
                }
            )
        else:
            m = c.get("measures", {}).get(name, {})
            unit = spec_unit(summary, name)
            corner_lines.append(
                {
                    "word": "worst",
                    "cls": "",
                    "text": f"{name}: largest spread at {corner_label(c)}: mean "
                    f"{eng(m.get('mean'), unit)}, sigma {eng(m.get('std'), unit)}"
                    + (f" ({w.get('criterion')})." if w.get("criterion") else "."),
                    "rank": 2.0,
                }
            )
    if len(corner_lines) > MAX_FINDINGS:  # the lowest corner yields first, the rest left to the corner table
        corner_lines.sort(key=lambda line: line["rank"])
        more = len(corner_lines) - MAX_FINDINGS
        corner_lines = corner_lines[:MAX_FINDINGS]
        corner_lines.append({"word": "", "cls": "", "text": f"\u2026 and {more} more measures: see the corner table."})
    failed = int(summary.get("failed_solves") or 0)
    if failed:
        findings.append(
            {
                "word": "CAUTION",
                "cls": "status-marginal",
                "text": f"{failed:,} of {summary.get('samples', 0):,} samples "
                "did not converge; they count as failures in every yield above.",
            }
        )
    zero = zero_failure_text(y.get("total"), y.get("ci95")) if y and y.get("passed") == y.get("total") else None
    needed = target.get("samples_needed")
    if needed is None and target_yield < 1:
        from mcmatch.stats.yields import samples_needed

        needed = samples_needed(target_yield, float(target.get("confidence") or 0.95))
    return {
        "status": status,
        "word": {"pass": "MEETS TARGET", "fail": "FAILS TARGET", "marginal": "TARGET NOT DEMONSTRATED"}[status],
        "cls": STATUS[status][1],
        "has_yield": bool(y) and bool(specs),
        "yield": yield_text(y.get("fraction")) if not zero else f"0 of {int(y['total']):,} failed",
        "yield_sub": zero.split("; ", 1)[1] if zero else None,
        "scope": scope_lines(summary),
        "ci": interval_text(y.get("ci95")) if not zero else f"\u2265 {yield_text((y.get('ci95') or [None])[0])}",
        "ci_sub": "Clopper-Pearson, two-sided" if not zero else "lower end, Clopper-Pearson, two-sided",
        "sigma": sigma_equivalent(y.get("fraction")),
        "passed": y.get("passed"),
        "total": y.get("total"),
        "target": yield_text(target_yield),
        "target_sigma": sigma_equivalent(target_yield),
        "target_given": target["given"],
        "confidence": percent(target.get("confidence"), 3),
        "lower_bound": yield_text(target.get("lower_bound")) if target.get("lower_bound") is not None else None,
        "samples_needed": f"{int(needed):,}" if needed is not None else None,
        "findings": findings,
        "corners": corner_lines,
        "failing": failing,
    }


def _names(names: list[str]) -> str:
    """One measure by name; several as "16 specs (err1, err2, ...)"."""
    return names[0] if len(names) == 1 else f"{len(names)} specs ({', '.join(names)})"


def _spec_findings(entries: list[tuple], word: str, cls: str, verb: str, target: float) -> list[dict]:
    """Verdict lines for specs of one status: one line each, or one line for all when there are more than three."""
    tail = "; more samples would settle it." if word != "FAILS" else "."
    if len(entries) <= MAX_FINDINGS:
        return [
            {
                "word": word,
                "cls": cls,
                "text": f"{name}: spec yield {yield_text(block.get('fraction'))} (95 % interval "
                f"{interval_text(block.get('ci95'))}) {verb} the target {yield_text(target)}; spec "
                f"{limits_text(lim, unit)}{tail}",
            }
            for name, block, lim, unit in entries
        ]
    fractions = [b.get("fraction") for _, b, _, _ in entries if finite(b.get("fraction")) is not None]
    lows = [b["ci95"][0] for _, b, _, _ in entries if isinstance(b.get("ci95"), list)]
    names = [name for name, *_ in entries]
    spread = f"{yield_text(min(fractions))} \u2026 {yield_text(max(fractions))}" if fractions else "\u2013"
    return [
        {
            "word": word,
            "cls": cls,
            "text": f"{_names(names)}: spec yields {spread}, lowest 95 % bound "
            f"{yield_text(min(lows)) if lows else chr(8211)}; each {verb} the target {yield_text(target)}{tail}",
        }
    ]


def header_items(summary: dict) -> list[tuple[str, str, str]]:
    """(label, value, css class) for the header grid."""
    run = summary.get("run") or {}
    started = run.get("started_utc")
    try:
        date = datetime.fromisoformat(started).strftime("%Y-%m-%d %H:%M UTC") if started else "\u2013"
    except ValueError:
        date = str(started)
    seconds, study = finite(run.get("command_time_s")), finite(run.get("run_time_s"))
    if seconds is not None:
        what = "warm re-run in mcmatch watch" if run.get("warm") else "whole command"
        run_time = f"{seconds:.3g} s ({what})" + (f"; study {study:.3g} s" if study is not None else "")
    else:
        run_time = f"{study:.3g} s (study only)" if study is not None else "\u2013"
    monte_carlo, workers = finite(run.get("monte_carlo_time_s")), run.get("workers")
    if monte_carlo is not None and run_time != "\u2013":
        where = "in this process" if workers in (None, 1) else f"on {workers} workers"
        run_time += f"; main Monte Carlo {monte_carlo:.3g} s {where}"
    items = [
        ("Run date", date, ""),
        ("mcmatch", str(run.get("mcmatch_version", "\u2013")), ""),
        ("Samples", f"{summary.get('samples', 0):,}", ""),
        ("Seed", str(summary.get("seed", "\u2013")), ""),
        ("Run time", run_time, ""),
        ("Machine", str(run.get("machine", "\u2013")), ""),
        ("Python", str(run.get("python", "\u2013")), ""),
        ("Technology", str(run.get("technology") or (summary.get("technology") or {}).get("name", "\u2013")), ""),
    ]
    cond = summary.get("conditions") or {}
    if cond:
        items.append(("Condition", f"{cond.get('corner', 'tt')}, {celsius(cond.get('temperature'))}", ""))
    if run.get("sampling") or summary.get("sampling"):
        items.append(("Sampling", sampling_text(run.get("sampling") or summary.get("sampling")), ""))
    items.append(("Config", str(run.get("config", "\u2013")), "mono"))
    items.append(("Config digest (sha256)", str(run.get("config_digest", "\u2013")), "mono digest"))
    return items
