"""Every sub-command's ``--help``: each default shown once, never an empty one.

Outside reference: argparse's own help rendering (``format_help``) of the real
parser; the check walks every sub-command, so a new option is covered as soon
as it is registered.
"""

from __future__ import annotations

import argparse
import re

import pytest

from cavchar.cli.main import build_parser

EMPTY_DEFAULTS = ("(default: None)", "(default: False)", "(default: )", "(default: [])",
                  "(default: ())")


def _all_parsers():
    found = []

    def walk(parser: argparse.ArgumentParser, path: tuple[str, ...]) -> None:
        found.append((" ".join(("cavchar", *path)), parser))
        for action in parser._actions:
            if isinstance(action, argparse._SubParsersAction):
                for name, sub in action.choices.items():
                    walk(sub, (*path, name))

    walk(build_parser(), ())
    return found


PARSERS = _all_parsers()


def test_every_command_is_walked():
    names = {name for name, _ in PARSERS}
    # a broken walk would pass the checks below vacuously
    assert {"cavchar fit jumps", "cavchar fit ringdown", "cavchar log add",
            "cavchar simulate probes", "cavchar plan ringdown"} <= names
    assert len(PARSERS) >= 25


@pytest.mark.parametrize(("name", "parser"), PARSERS, ids=[n for n, _ in PARSERS])
def test_help_shows_each_default_once(name, parser, monkeypatch):
    monkeypatch.setenv("COLUMNS", "100")
    text = parser.format_help()
    for empty in EMPTY_DEFAULTS:
        assert empty not in text, f"{name} --help shows {empty}"
    formatter = parser._get_formatter()
    for action in parser._actions:
        if not action.help or action.help is argparse.SUPPRESS:
            continue
        rendered = formatter._expand_help(action) if action.help else ""
        shown = len(re.findall(r"\(default: ", rendered))
        assert shown <= 1, f"{name} {action.option_strings}: default shown {shown} times"
        if shown:
            assert "default" not in rendered.split("(default: ")[0].lower(), (
                f"{name} {action.option_strings}: the help already speaks of its default")


@pytest.mark.parametrize("name", ["cavchar fit jumps", "cavchar fit ringdown",
                                  "cavchar fit probes"])
def test_fit_help_speaks_cli_only(name):
    parser = dict(PARSERS)[name]
    text = parser.format_help()
    # no Python spellings in what a command-line user reads
    for python_word in ("force=True", "end_time", "=None", "=True", "=False", "()"):
        assert python_word not in text, f"{name} --help shows {python_word!r}"


PYTHON_SPELLINGS = re.compile(r"\w+=(True|False|None)\b|\bread_\w+_record\b|\bfit_\w+\(|"
                              r"\b(end_time|time_unit|exact_rows)\b")


def test_error_messages_speak_cli_only(tmp_path, run_cli):
    from cavchar.io.writers import write_sampled_record
    from cavchar.simulate import simulate_sampled_record

    sampled = tmp_path / "samples.csv"
    import numpy as np

    write_sampled_record(simulate_sampled_record(5e-3, 0.1, np.arange(1000) * 1e-3, seed=1),
                         sampled)
    (tmp_path / "out").mkdir()
    (tmp_path / "out" / "result.json").write_text("{}")
    cases = [
        # a sampled record fitted as exact: the advice is an option, not a Python argument
        (("fit", "jumps", sampled, "--quiet"), "--sampled"),
        # an existing output file: the advice is --force, not force=True
        (("fit", "jumps", sampled, "--sampled", "-o", tmp_path / "out", "--quiet"), "--force"),
    ]
    for argv, advice in cases:
        code, _, err = run_cli(*argv)
        assert code == 2 and advice in err, err
        assert not PYTHON_SPELLINGS.search(err), err


def test_signal_words_are_the_same_in_every_command():
    # the fit, simulate and plan commands name the signal kinds with the same words
    choices = {}
    for name, parser in PARSERS:
        for action in parser._actions:
            if "--signal" in action.option_strings and action.choices:
                choices[name] = set(action.choices)
    fit = choices.pop("cavchar fit ringdown")
    for name, words in choices.items():
        assert words <= fit, f"{name} --signal: {sorted(words - fit)} not a fit word"


@pytest.mark.parametrize("name", ["cavchar fit jumps", "cavchar fit ringdown",
                                  "cavchar fit probes"])
def test_sampler_defaults_in_help_are_those_of_the_settings(name):
    """The defaults live in SamplerSettings; the help states them without importing the
    sampler (--help stays light), so this test keeps the two in step."""
    from cavchar.inference import SamplerSettings

    kind = name.split()[-1]
    settings = SamplerSettings.for_fit(kind)
    actions = {a.dest: a for a in dict(PARSERS)[name]._actions}
    assert actions["walkers"].default is None and actions["max_steps"].default is None
    assert f"(unset: {settings.n_walkers})" in actions["walkers"].help
    assert f"(unset: {settings.max_steps})" in actions["max_steps"].help


def test_kernel_kinds_of_the_command_are_those_of_the_module():
    """--help lists the kinds without importing the fits; this keeps the two lists equal."""
    from cavchar.cli.kernels import KIND_CHOICES
    from cavchar.kernel_cache import KINDS

    assert tuple(KIND_CHOICES) == tuple(KINDS)
