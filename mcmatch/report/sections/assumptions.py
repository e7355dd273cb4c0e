"""Assumptions and cautions: what the numbers rest on and what sign-off needs instead."""

from __future__ import annotations

from collections.abc import Mapping


def assumptions(summary: dict, config: Mapping) -> list[str]:
    tech = summary.get("technology") or {}
    models = sorted({str(tech[p].get("model")) for p in ("nmos", "pmos") if isinstance(tech.get(p), Mapping)})
    analysis = config.get("analysis") if isinstance(config.get("analysis"), Mapping) else {}
    sampling = analysis.get("sampling", "random")
    items = [
        "These are pre-layout estimates from compact device models ("
        + (", ".join(models) or "see the technology table")
        + ") and the given mismatch coefficients; they are not sign-off results.",
        "Local mismatch follows Pelgrom's law: each device's threshold and current-factor deviations are independent "
        "and normal, with sigma = A/\u221a(2\u00b7m\u00b7W\u00b7L) per device from the pair-convention "
        "coefficients A_VT and A_beta of the technology table.",
        "Systematic layout effects (gradients, well proximity, stress, orientation, routing IR drop) are not included "
        "unless modelled explicitly in a placement study.",
        "Sign-off uses the foundry's qualified statistical models and the local design rules.",
        f"Samples are drawn with '{sampling}' sampling from seed {summary.get('seed', '?')}; the same seed gives the "
        "same numbers on any machine and with any number of workers.",
        "Failed solves are counted, never dropped: each fails every spec in the yields above. Statistics of a measure "
        "use its converged samples only.",
        "Yield intervals are exact binomial (Clopper-Pearson); the normal-fit figures (Cp, Cpk, normal-fit yield, "
        "area fits) extrapolate a normal distribution and are only as good as the tails in the probability plots.",
    ]
    notes = config.get("notes")
    if isinstance(notes, str) and notes.strip():
        items.append(f"Designer's notes: {notes.strip()}")
    return items
