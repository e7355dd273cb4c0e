"""Config fuzzing: random mutations of every bundled config, and random TOML documents.

Each input either runs or exits with status 2 and a message naming the file and the key; never a traceback.
Profiles (common practice, no source): the default "ci" profile is fast; the long profile runs at least 10,000
mutated configs (spread over the bundled configs) and 10,000 random documents:
    MCMATCH_FUZZ=long python -m pytest tests/test_fuzz.py -q -p no:cacheprovider
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest
import tomli_w
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from mcmatch.cli import main
from mcmatch.config.loading import load_config
from mcmatch.errors import ConfigError

ROOT = Path(__file__).resolve().parents[1]
CONFIGS = sorted(p for p in (ROOT / "configs").glob("*.toml"))
LONG = os.environ.get("MCMATCH_FUZZ") == "long"
#: Long profile: at least this many mutated configs in all (spread over the configs), and as many random documents.
EXAMPLES = int(os.environ.get("MCMATCH_FUZZ_EXAMPLES", "10000"))
PER_CONFIG = -(-EXAMPLES // max(1, len(CONFIGS)))

settings.register_profile(
    "fuzz-ci", max_examples=8, deadline=None, suppress_health_check=list(HealthCheck), derandomize=True
)
settings.register_profile("fuzz-long", max_examples=PER_CONFIG, deadline=None, suppress_health_check=list(HealthCheck))
PROFILE = "fuzz-long" if LONG else "fuzz-ci"

ODD_STRINGS = [
    "5 V",
    "4 um",
    "-1 %",
    "nan um",
    "inf V",
    "-inf",
    "1e308 um",
    "1e-308 um",
    "27 degC",
    "-300 degC",
    "0 K",
    "<script>alert(1)</script>",
    "gnd",
    "MREF",
    "",
    " ",
    "Ωµ⚡ü",
    "1 %*um",
    "5 mV*um",
    "4 um um",
    "4 (",
    "1/0 V",
    "1e999 m",
    "0x10 um",
    "--4 um",
    "4 um/V^",
    "300 uA/V^2",
    "ekv",
    "square-law",
    "tt",
    "ff",
    "{}",
    "[1,2]",
]
VALUES = st.one_of(
    st.sampled_from(ODD_STRINGS),
    st.integers(min_value=-(2**63), max_value=2**63 - 1),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0, -1, 1, 1e-300, 1e300, 0.5, 2**64]),
    st.booleans(),
    st.text(max_size=12),
    st.lists(st.sampled_from(["MREF", "MOUT", "nb", "4 um", 1, -2.5]), max_size=4),
    st.dictionaries(
        st.sampled_from(["min", "max", "current", "voltage", "value", "x"]), st.sampled_from(ODD_STRINGS), max_size=3
    ),
)


def _paths(doc, prefix=()):
    """Every key path in a TOML document (tables, array entries, leaves)."""
    out = []
    if isinstance(doc, dict):
        for k, v in doc.items():
            out.append((*prefix, k))
            out.extend(_paths(v, (*prefix, k)))
    elif isinstance(doc, list):
        for i, v in enumerate(doc):
            out.append((*prefix, i))
            out.extend(_paths(v, (*prefix, i)))
    return out


def _mutate(doc, path, op, value):
    parent = doc
    for part in path[:-1]:
        parent = parent[part]
    key = path[-1]
    if op == "delete":
        if isinstance(parent, list):
            parent.pop(key)
        else:
            parent.pop(key)
    elif op == "duplicate" and isinstance(parent, list):
        parent.append(parent[key])
    elif op == "rename" and isinstance(parent, dict):
        parent[str(key) + "x"] = parent.pop(key)
    else:
        parent[key] = value


def _keep_fast(doc):
    """Bound the cost of analyses the mutation left valid, so the fast profile stays fast."""
    analysis = doc.get("analysis") if isinstance(doc, dict) else None
    if not isinstance(analysis, dict):
        return
    for table, key, small in (("corners", "samples", 50), ("area", "samples", 200), ("high_sigma", "samples", 200)):
        sub = analysis.get(table)
        if isinstance(sub, dict) and isinstance(sub.get(key, small), int) and sub.get(key, small) >= small:
            sub[key] = small
    if isinstance(analysis.get("corners"), dict) and "samples" not in analysis["corners"]:
        analysis["corners"]["samples"] = 50
    if isinstance(analysis.get("area"), dict) and "samples" not in analysis["area"]:
        analysis["area"]["samples"] = 200


def _check_outcome(status: int, err: str, files: list[str]) -> None:
    assert status in (0, 2), err
    if status == 2:
        assert "Traceback" not in err, err
        assert any(f in err for f in files), err
        assert "key '" in err or "not found" in err or "command line" in err, err


@pytest.mark.parametrize("source", CONFIGS, ids=[p.stem for p in CONFIGS])
def test_mutated_configs_run_or_exit_2(source, tmp_path_factory):
    import tomllib

    base = tomllib.loads(source.read_text())
    paths = _paths(base)
    work = tmp_path_factory.mktemp("fuzz")
    shutil.copytree(ROOT / "configs" / "technologies", work / "technologies")
    counter = {"n": 0}

    @settings(settings.get_profile(PROFILE))
    @given(
        path=st.sampled_from(paths),
        op=st.sampled_from(["delete", "replace", "replace", "duplicate", "rename"]),
        value=VALUES,
    )
    def check(path, op, value):
        import copy

        doc = copy.deepcopy(base)
        _mutate(doc, path, op, value)
        _keep_fast(doc)
        try:
            text = tomli_w.dumps(doc)
        except (TypeError, ValueError, OverflowError):
            return  # not representable in TOML (e.g. integers beyond 64 bits): no file a user could write
        counter["n"] += 1
        case = work / f"case{counter['n']}.toml"
        case.write_text(text)
        out = work / f"out{counter['n']}"
        import contextlib
        import io

        err = io.StringIO()
        with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
            status = main(["run", str(case), "--samples", "64", "--out", str(out), "--quiet", "--no-report"])
        _check_outcome(status, err.getvalue(), [case.name, "demo180.toml", "demo350.toml", "demo65.toml"])
        if status == 2:
            assert not out.exists()
        else:
            shutil.rmtree(out)

    check()


TOML_KEYS = st.sampled_from(
    [
        "title",
        "technology",
        "circuit",
        "measures",
        "specs",
        "analysis",
        "mosfet",
        "name",
        "type",
        "w",
        "l",
        "m",
        "drain",
        "gate",
        "source",
        "value",
        "samples",
        "seed",
        "nmos",
        "kprime",
        "vth0",
        "x",
        "ÿ",
        "template",
    ]
)
TOML_DOCS = st.recursive(
    st.one_of(st.sampled_from(ODD_STRINGS), st.integers(-(2**63), 2**63 - 1), st.floats(), st.booleans()),
    lambda children: st.one_of(st.lists(children, max_size=3), st.dictionaries(TOML_KEYS, children, max_size=4)),
    max_leaves=20,
)


@settings(settings.get_profile(PROFILE), max_examples=EXAMPLES if LONG else 60)
@given(doc=st.dictionaries(TOML_KEYS, TOML_DOCS, max_size=6))
def test_random_toml_documents_load_or_raise_config_error(tmp_path_factory, doc):
    try:
        text = tomli_w.dumps(doc)
    except (TypeError, ValueError, OverflowError):
        return
    case = tmp_path_factory.mktemp("doc") / "random.toml"
    case.write_text(text)
    try:
        load_config(case)
    except ConfigError as exc:  # the only acceptable failure; it must name a file and, past the TOML level, a key
        assert exc.file is not None, str(exc)
        assert exc.file.endswith("random.toml") or exc.key == "technology", str(exc)
