"""Quasi-Monte Carlo sampling (``[analysis] sampling = "sobol"``): scrambled Sobol' points through the normal quantile,
with the randomised-QMC error estimate from independent scramblings."""

from __future__ import annotations

import itertools
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats
from scipy.special import ndtr

from mcmatch.config.loading import config_from_dict
from mcmatch.draws.mismatch import (
    BLOCK,
    SOBOL_SCRAMBLINGS,
    SobolStream,
    sobol_engine,
    sobol_jump,
    standard_normals,
)
from mcmatch.run.chunks import run_chunk
from mcmatch.run.study import prepare, with_seed
from mcmatch.stats import moments
from mcmatch.studies.pipeline import RunOptions, run_study

R = SOBOL_SCRAMBLINGS

# The Kinget example circuit of tests/test_core.py: a 1:1 NMOS mirror, W/L = 10/1 um, Vov = 0.2 V, lambda = 0.
KINGET_TECH = {
    "name": "Kinget example",
    "nmos": {"kprime": "200 uA/V^2", "vth0": "0.4 V", "lambda": 0.0, "a_vt": "5 mV*um", "a_beta": "1 %*um"},
}


def mos(name, d, g, s):
    return {"name": name, "type": "nmos", "drain": d, "gate": g, "source": s, "w": "10 um", "l": "1 um"}


def kinget_mirror(samples: int, seed: int, sampling: str, specs: dict | None = None):
    raw = {
        "title": "Kinget mirror",
        "technology": KINGET_TECH,
        "circuit": {
            "mosfet": [mos("MREF", "nb", "nb", "gnd"), mos("MOUT", "out", "nb", "gnd")],
            "current_source": [{"name": "IREF", "from": "vdd", "to": "nb", "value": "40 uA"}],
            "voltage_source": [
                {"name": "VDD", "plus": "vdd", "minus": "gnd", "value": "1.8 V"},
                {"name": "VOUT", "plus": "out", "minus": "gnd", "value": "1.0 V"},
            ],
        },
        "measures": {"err": {"ratio": ["MOUT", "IREF"]}},
        "specs": specs if specs is not None else {"err": {"min": "-2 %", "max": "2 %"}},
        "analysis": {"samples": samples, "seed": seed, "sampling": sampling, "contributions": False},
    }
    return config_from_dict(raw, Path("kinget.toml"))


# Pelgrom 1989; Kinget, IEEE JSSC 40(6), 2005: sigma^2(dI/I) = sigma^2(dbeta/beta) + (gm/I)^2 sigma^2(dVt) = 1.6125 %
KINGET_SIGMA = math.sqrt(0.01**2 / 10 + (2 / 0.2) ** 2 * (5e-3) ** 2 / 10)


# --------------------------------------------------------------------------------------------- the points
def test_sobol_draws_depend_only_on_the_sample_index():
    # Common practice, no source: sample i's numbers depend only on (seed, i), whatever the pieces they are drawn in.
    whole = standard_normals(5, 0, 3000, 6, sampling="sobol")
    cuts = (0, 1, 7, 1000, 1001, 2999, 3000)
    parts = np.concatenate([standard_normals(5, a, b, 6, sampling="sobol") for a, b in itertools.pairwise(cuts)])
    assert np.array_equal(whole, parts)
    stream = SobolStream(5, 0, 6)
    assert np.array_equal(np.concatenate([stream.take(13).T, stream.take(2987).T]), whole)
    assert not np.array_equal(standard_normals(6, 0, 3000, 6, sampling="sobol"), whole)
    assert not np.array_equal(standard_normals(5, 0, 3000, 6), whole)  # random draws are another stream


@pytest.mark.parametrize("index", [1, 2, 3, 255, 256, 1000, 65537])
def test_sobol_jump_lands_where_scipy_fast_forward_does(index):
    # Reference: scipy.stats.qmc.Sobol.fast_forward (scipy), which steps through every skipped point.
    ours = sobol_jump(sobol_engine(3, 2, 5), index).random(9)
    theirs = sobol_engine(3, 2, 5).fast_forward(index).random(9)
    assert np.array_equal(ours, theirs)


def test_each_scrambling_is_stratified_in_every_coordinate():
    # Sobol' (1967); Niederreiter, Random Number Generation and Quasi-Monte Carlo Methods (SIAM 1992), ch. 4: the
    # first 2^m points of a Sobol' sequence are a (t, m, s)-net, so each one-dimensional projection holds exactly one
    # point in each interval [k 2^-m, (k + 1) 2^-m). Owen (J. Complexity 1998): scrambling keeps the net property.
    m = 8
    z = standard_normals(9, 0, R << m, 6, sampling="sobol")
    u = ndtr(z)
    for r in range(R):
        cells = np.floor(u[r::R] * (1 << m)).astype(int)  # scrambling r holds samples r, r + R, ...
        for dim in range(z.shape[1]):
            assert np.array_equal(np.sort(cells[:, dim]), np.arange(1 << m)), (r, dim)


# --------------------------------------------------------------------------------------------- sigma and its error
def test_qmc_sigma_agrees_with_pelgrom_kinget_and_plain_mc_with_a_smaller_error():
    n = R * 2048
    qmc = run_study(kinget_mirror(n, 11, "sobol"), RunOptions(jobs=1, keep_samples=0)).summary
    mc = run_study(kinget_mirror(n, 11, "random"), RunOptions(jobs=1, keep_samples=0)).summary
    assert qmc["failed_solves"] == 0 and mc["failed_solves"] == 0
    q, m = qmc["sampling"]["measures"]["err"], mc["sampling"]["measures"]["err"]
    assert qmc["sampling"]["method"] == "sobol" and qmc["sampling"]["balanced"] is True
    assert qmc["sampling"]["points_per_scrambling"] == 2048 and qmc["sampling"]["warnings"] == []
    assert q["std"] == qmc["measures"]["err"]["std"]
    # rel. s.e. of a sample sigma ~ 1/sqrt(2(N-1)) (DESIGN.md section 4): 4 plain-MC standard errors, as test_core
    tol = 4 / math.sqrt(2 * (n - 1))
    assert q["std"] == pytest.approx(KINGET_SIGMA, rel=tol)
    assert m["std"] == pytest.approx(KINGET_SIGMA, rel=tol)
    # the two estimates agree within 4 combined standard errors (their own estimates of them)
    assert abs(q["std"] - m["std"]) <= 4 * math.hypot(q["std_error"], m["std_error"])
    # plain MC's error is the formula; QMC's the spread over R scramblings / sqrt(R)
    assert m["std_error"] == pytest.approx(m["std"] / math.sqrt(2 * (n - 1)), rel=1e-12)
    assert q["std_error"] == pytest.approx(np.std(q["replicate_std"], ddof=1) / math.sqrt(R), rel=1e-12)
    # Owen, "Scrambling Sobol' and Niederreiter-Xing points", J. Complexity 14, 1998: for a smooth integrand the
    # scrambled-net variance falls faster than 1/N, so at equal N the RQMC error is well below plain MC's (the
    # estimate from R = 8 scramblings is itself uncertain by ~1/sqrt(2(R-1)) = 27 %, hence the margin of 2)
    assert q["std_error"] < m["std_error"] / 2
    assert q["sample_ratio"] > 4
    # yield: plain MC's error is the binomial formula (common practice, no source)
    p = mc["sampling"]["yield"]["fraction"]
    assert p == mc["yield"]["fraction"]
    assert mc["sampling"]["yield"]["std_error"] == pytest.approx(math.sqrt(p * (1 - p) / n), rel=1e-12)


def test_spread_over_scramblings_is_smaller_than_over_random_seeds():
    # L'Ecuyer and Lemieux, "Recent advances in randomized quasi-Monte Carlo methods" (2002): independent
    # randomisations of one point set give i.i.d. unbiased estimates, whose spread measures the RQMC error.
    n = 4096
    study = prepare(kinget_mirror(n, 1, "random"))
    seeds = [np.std(run_chunk(with_seed(study, s), 0, n)["err"], ddof=1) for s in range(R)]
    spread_random = np.std(seeds, ddof=1)
    # one Sobol' run of R scramblings with n points each
    qmc = run_study(kinget_mirror(R * n, 1, "sobol"), RunOptions(jobs=1, keep_samples=0)).summary
    spread_qmc = np.std(qmc["sampling"]["measures"]["err"]["replicate_std"], ddof=1)
    # plain MC first: 8 seeds' spread against sigma/sqrt(2(n-1)), within the chi-square(7) 0.1 %..99.9 % range
    formula = KINGET_SIGMA / math.sqrt(2 * (n - 1))
    lo, hi = (math.sqrt(stats.chi2.ppf(q, R - 1) / (R - 1)) for q in (0.001, 0.999))
    assert lo * formula < spread_random < hi * formula
    # the scramblings' spread is far below: at most the plain MC spread's upper bound / 3
    assert spread_qmc < spread_random / 3


def test_rqmc_error_estimate_matches_the_spread_over_seeds():
    # L'Ecuyer and Lemieux 2002: the variance over scramblings is an unbiased estimate of the RQMC variance. Over K
    # independently seeded runs the seen variance of sigma (K - 1 dof) and the mean estimated one (K (R - 1) dof)
    # agree within the F distribution's 0.1 %..99.9 % range (scipy.stats.f).
    k, n = 12, R * 512
    runs = [
        run_study(kinget_mirror(n, 100 + s, "sobol", specs={}), RunOptions(jobs=1, keep_samples=0)).summary
        for s in range(k)
    ]
    seen = np.var([r["sampling"]["measures"]["err"]["std"] for r in runs], ddof=1)
    estimated = np.mean([r["sampling"]["measures"]["err"]["std_error"] ** 2 for r in runs])
    lo, hi = stats.f.ppf([0.001, 0.999], k - 1, k * (R - 1))
    assert lo < seen / estimated < hi


def test_unbalanced_sample_counts_are_flagged():
    # Sobol' balance holds at powers of 2 points per scrambling (scipy.stats.qmc documentation); common practice
    summary = run_study(kinget_mirror(R * 1000 + 3, 2, "sobol"), RunOptions(jobs=1, keep_samples=0)).summary
    block = summary["sampling"]
    assert block["balanced"] is False
    assert block["points_per_scrambling"] == 1000
    assert any("power of 2" in w for w in block["warnings"])
    assert any("multiple" in w for w in block["warnings"])


# --------------------------------------------------------------------------------------------- reproducibility
def test_same_sobol_results_for_any_chunking_and_worker_count():
    # Common practice, no source: same seed, same numbers, whatever the chunking or the number of workers.
    n = BLOCK + 3 * moments.STAT_BLOCK + 517
    config = kinget_mirror(n, 4, "sobol")
    runs = [
        run_study(config, RunOptions(jobs=1, keep_samples=n)),
        run_study(config, RunOptions(jobs=1, keep_samples=n, chunk_size=moments.STAT_BLOCK)),
        run_study(config, RunOptions(jobs=2, keep_samples=n, chunk_size=2 * moments.STAT_BLOCK)),
    ]
    keys = ("measures", "yield", "sampling", "failed_solves")
    first = {k: runs[0].summary[k] for k in keys}
    for other in runs[1:]:
        assert {k: other.summary[k] for k in keys} == first
        assert other.table.equals(runs[0].table)
    assert runs[1].summary["statistics"]["chunks"] > runs[0].summary["statistics"]["chunks"]
    # the engine's chunks: any split of the sample range gives the same rows
    study = prepare(config)
    whole = run_chunk(study, 0, 20000)
    cuts = (0, 5, 8192, 12345, 20000)
    parts = [run_chunk(study, a, b) for a, b in itertools.pairwise(cuts)]
    for key in ("err", "dvth_MREF", "dbeta_MOUT"):
        assert np.array_equal(whole[key], np.concatenate([p[key] for p in parts]))


def test_report_shows_the_sampling_error_table():
    # Project contract (issue 9): the report renders summary["sampling"] when present.
    from mcmatch.report.render import sampling_section, sampling_text

    summary = run_study(kinget_mirror(R * 256, 3, "sobol"), RunOptions(jobs=1, keep_samples=0)).summary
    section = sampling_section(summary)
    labels = [r["cells"][0]["text"] for r in section["table"]["rows"]]
    assert labels == ["sigma of err", "joint yield"]
    assert sampling_text(summary["sampling"]) == "Sobol' QMC, 8 scramblings \u00d7 256 points"
    assert any("Student" in n or "uncertain" in n for n in section["notes"])
