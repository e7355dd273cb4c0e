"""Hostile config files and arguments: exit 2 with a short, inert message; never a traceback, never a flood.

All checks: common practice, no source (a parser must bound its recursion, a message must not echo megabytes, and
text from input files must not drive the terminal).
"""

from __future__ import annotations

import pytest
from conftest import snapshot

from mcmatch.cli import main
from mcmatch.errors import QUOTE_LIMIT, ConfigError

ESC = "\x1b"


def run_check(config, capsys):
    status = main(["check", str(config)])
    captured = capsys.readouterr()
    return status, captured.out, captured.err


@pytest.mark.parametrize("depth", [40, 500, 2000])
@pytest.mark.parametrize("kind", ["array", "table"])
def test_deeply_nested_values_are_exit_2(demo_project, tmp_path, capsys, depth, kind):
    value = "[" * depth + "]" * depth if kind == "array" else "{a = " * depth + "1" + "}" * depth
    demo_project.write_text(f"deep = {value}\n" + demo_project.read_text())
    before = snapshot(tmp_path)
    assert main(["run", str(demo_project), "--out", str(tmp_path / "r"), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "nested more than 32 levels" in err and str(demo_project) in err and "Traceback" not in err
    assert snapshot(tmp_path) == before


def test_deep_nesting_in_the_technology_file_names_that_file(demo_project, capsys):
    tech = demo_project.parent / "technologies" / "demo180.toml"
    tech.write_text("deep = " + "[" * 600 + "]" * 600 + "\n" + tech.read_text())
    status, _, err = run_check(demo_project, capsys)
    assert status == 2 and "demo180.toml" in err and "nested more than" in err


def test_a_huge_title_gives_a_short_message(demo_project, capsys):
    title = "x" * 20_000_000
    demo_project.write_text(f'title = "{title}"\n' + demo_project.read_text().replace("title = ", "old_title = ", 1))
    demo_project.write_text(demo_project.read_text().replace("old_title = ", "# ", 1))
    status, _, err = run_check(demo_project, capsys)
    assert status == 2 and "key 'title'" in err and "at most 500 characters" in err
    assert f"'{'x' * QUOTE_LIMIT}'... (20000000 characters)" in err
    assert len(err) < 2 * QUOTE_LIMIT + 200


@pytest.mark.parametrize(
    ("replace", "by", "key"),
    [
        ('w = "4 um"', 'w = "' + "4" * 5_000_000 + ' um"', "circuit.mosfet[0].w"),
        ('w = "4 um"', "w = " + "9" * 4000, "circuit.mosfet[0].w"),  # beyond any float
        ("m = 4", "m = " + "9" * 4000, "circuit.mosfet[1].m"),
        ("[measures]", '[measures]\n"' + "q" * 100_000 + '" = { voltage = "nb" }', "measures"),
    ],
    ids=["long-quantity", "huge-number", "huge-count", "long-measure-name"],
)
def test_huge_values_give_short_messages(demo_project, capsys, replace, by, key):
    demo_project.write_text(demo_project.read_text().replace(replace, by, 1))
    status, _, err = run_check(demo_project, capsys)
    assert status == 2 and key in err and "Traceback" not in err
    assert len(err) < 1000


def test_an_integer_beyond_python_s_digit_limit_is_exit_2(demo_project, capsys):
    demo_project.write_text(demo_project.read_text().replace("m = 4", "m = " + "9" * 5000, 1))
    status, _, err = run_check(demo_project, capsys)
    assert status == 2 and "not valid TOML" in err and "Traceback" not in err


def test_control_characters_in_the_title_are_escaped_on_the_console(demo_project, tmp_path, capsys):
    demo_project.write_text(demo_project.read_text().replace('title = "', 'title = "\\u001b[2J\\u0007\\u009b', 1))
    for argv in (
        ["check", str(demo_project)],
        ["run", str(demo_project), "--out", str(tmp_path / "r"), "--samples", "20"],
    ):
        assert main(argv) == 0
        out = capsys.readouterr().out
        assert ESC not in out and "\x07" not in out and "\x9b" not in out
        assert "\\x1b[2J\\x07\\x9bLumen-16" in out


def test_control_characters_in_names_are_escaped_in_errors(demo_project, capsys):
    demo_project.write_text(demo_project.read_text().replace('name = "MREF"', 'name = "M\\u001b]0;owned\\u0007"', 1))
    status, _, err = run_check(demo_project, capsys)
    assert status == 2 and ESC not in err and "M\\x1b]0;owned\\x07" in err


def test_control_characters_on_the_command_line_are_escaped(demo_project, capsys):
    assert main(["check", str(demo_project), "--corner", f"{ESC}[31mff"]) == 2
    err = capsys.readouterr().err
    assert ESC not in err and "--corner" in err and "\\x1b[31mff" in err
    assert main(["run", str(demo_project), "--samples", f"1{ESC}[2J"]) == 2  # argparse's own message
    err = capsys.readouterr().err
    assert ESC not in err and "--samples" in err


def test_config_error_text_is_bounded_and_inert():
    exc = ConfigError("bad value " + "v" * 100_000 + ESC, file="f" * 10_000 + ESC, key="k" * 10_000)
    text = str(exc)
    assert ESC not in text and len(text) < 5000 and "more characters" in text
