"""Every ``cavchar ...`` command shown in README.md and docs/*.md is checked.

Outside reference: the documentation itself, held against the real argument
parser (every command, default test set) and against a real run (slow set).

A command is a line of a fenced code block that starts with ``cavchar `` (a
trailing backslash continues it) or an inline code span ``cavchar ...``.  A
*synopsis* (it shows placeholders such as ``FILE``, ``[--json]``, ``...`` or
``a / b``) cannot run as written: its sub-command must exist and every option it
names must be an option of that sub-command.  Every other command is *concrete*:
it must parse as written, and the slow test runs each one in a temporary folder,
in the order of its document (one folder per document, so a command can use
what an earlier one wrote), and checks its exit code.

Setup and expected failures are written in the document as an HTML comment on
its own line before the block (or the line with inline commands) it concerns
(DEVELOPERS.md, "Commands in the docs")::

    <!-- docs-test: setup cavchar simulate jumps ... --file record.csv; exit 2 -->

Clauses, separated by ``;``: ``setup CMD`` runs a hidden ``cavchar`` command
first (it must succeed); ``file NAME`` writes the code block that follows to NAME
(a spec or a table the commands read; it is shown, not hidden); ``exit N`` is the
exit code every command of the block must give (default 0); ``skip REASON``
parses the commands without running them
(for a command another test runs, such as the demo).
"""

from __future__ import annotations

import argparse
import functools
import os
import re
import shlex
import shutil
import subprocess
import sys
from dataclasses import dataclass, field
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
DOCUMENTS = [REPO / "README.md", *sorted((REPO / "docs").glob("*.md"))]
DIRECTIVE = re.compile(r"^\s*<!--\s*docs-test:(.*?)-->\s*$")
INLINE = re.compile(r"`(cavchar [^`]*)`")
#: placeholders and synopsis marks: FILE, SPEC.toml, RESULT.json, [--json], a / b, ...
PLACEHOLDER_WORDS = ("FILE|NAME|DIR|KIND|LABEL|N|SPEC|RESULT|TRACE|T|T0|F|UNIT|STATE|S|W|C|L|"
                     "PRIOR|SHAPE|CAVITY|COOLDOWN|PATH|TEMP")
PLACEHOLDER = re.compile(rf"(^|=)({PLACEHOLDER_WORDS})(\.[a-z]+)?$|^\[|\]$|^\.\.\.$|^/$|\||^<")


@dataclass
class Directive:
    setup: list[list[str]] = field(default_factory=list)
    exit_code: int = 0
    skip: str | None = None
    file: str | None = None


@dataclass
class Command:
    document: str
    line: int
    words: list[str]
    directive: Directive
    inline: bool = False

    @property
    def synopsis(self) -> bool:
        return any(PLACEHOLDER.search(w) for w in self.words)

    @property
    def label(self) -> str:
        return f"{self.document}:{self.line}"


def parse_directive(text: str, where: str) -> Directive:
    directive = Directive()
    for clause in (c.strip() for c in text.split(";")):
        if not clause:
            continue
        key, _, rest = clause.partition(" ")
        if key == "setup":
            words = shlex.split(rest)
            assert words[:1] == ["cavchar"], f"{where}: setup must be a cavchar command"
            directive.setup.append(words[1:])
        elif key == "exit":
            directive.exit_code = int(rest)
        elif key == "file":
            directive.file = rest.strip()
        elif key == "skip":
            directive.skip = rest.strip() or "no reason given"
        else:
            raise AssertionError(f"{where}: unknown docs-test clause {clause!r}")
    return directive


#: files shown in the docs that the commands use: document -> [(line, name, text)]
FILES: dict[str, list[tuple[int, str, str]]] = {}


def extract(path: Path) -> list[Command]:
    """Commands of one document with the directive that applies to each; a block
    under a ``file NAME`` directive is recorded in :data:`FILES` instead."""
    name = path.relative_to(REPO).as_posix()
    commands: list[Command] = []
    pending: Directive | None = None
    in_block = False
    block_directive = Directive()
    lines = path.read_text(encoding="utf-8").splitlines()
    i = 0
    while i < len(lines):
        line = lines[i]
        number = i + 1
        i += 1
        if line.lstrip().startswith("```"):
            in_block = not in_block
            if in_block:
                block_directive, pending = pending or Directive(), None
                if block_directive.file:
                    end = next(j for j in range(i, len(lines))
                               if lines[j].lstrip().startswith("```"))
                    FILES.setdefault(name, []).append(
                        (number, block_directive.file, "\n".join(lines[i:end]) + "\n"))
                    i, in_block = end + 1, False
            continue
        if in_block:
            if not line.lstrip().startswith("cavchar "):
                continue
            text = line.strip()
            while text.endswith("\\") and i < len(lines):
                text = text[:-1] + " " + lines[i].strip()
                i += 1
            words = shlex.split(text, comments=True)
            commands.append(Command(name, number, words[1:], block_directive))
            continue
        match = DIRECTIVE.match(line)
        if match:
            pending = parse_directive(match.group(1), f"{name}:{number}")
            continue
        spans = INLINE.findall(line)
        if spans:
            for span in spans:
                commands.append(Command(name, number, shlex.split(span)[1:],
                                        pending or Directive(), inline=True))
            pending = None
    return commands


ALL_COMMANDS = [c for doc in DOCUMENTS for c in extract(doc)]


def test_the_docs_show_commands():
    # a broken extractor would pass every check below vacuously
    concrete = [c for c in ALL_COMMANDS if not c.synopsis]
    assert len(concrete) >= 25
    assert {c.document for c in concrete} >= {"docs/jump-records.md", "docs/ringdown.md",
                                              "docs/cooldown-log.md"}


def _subcommands(parser: argparse.ArgumentParser) -> dict[str, argparse.ArgumentParser]:
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            return dict(action.choices)
    return {}


@functools.lru_cache(maxsize=1)
def _parser() -> argparse.ArgumentParser:
    from cavchar.cli.main import build_parser

    return build_parser()


def _walk(words: list[str]) -> tuple[argparse.ArgumentParser, list[str], list[str]]:
    """(parser of the deepest sub-command named by ``words``, its path, the words left)."""
    parser, path, rest = _parser(), [], list(words)
    while rest and rest[0] in _subcommands(parser):
        path.append(rest[0])
        parser = _subcommands(parser)[rest.pop(0)]
    return parser, path, rest


def check_synopsis(command: Command) -> None:
    """Sub-commands exist (``a / b`` alternatives too), every named option exists."""
    words = command.words
    alternatives = [words[i + 1] for i, w in enumerate(words[:-1]) if w == "/"]
    if alternatives:
        first = words.index("/") - 1
        _, path, _ = _walk(words[:first])
        for name in [words[first], *alternatives]:
            _, reached, _ = _walk([*path, name])
            assert reached == [*path, name], f"{command.label}: no sub-command {name!r}"
        return
    parser, path, rest = _walk(words)
    known = {s for a in parser._actions for s in a.option_strings}
    if rest[:1] == ["..."]:  # `cavchar fit ... -o DIR`: an option of any sub-command
        known |= {s for sub in _subcommands(parser).values() for a in sub._actions
                  for s in a.option_strings}
    named = {w.strip("[]").split("=")[0] for w in rest}
    named = {w for w in named if w.startswith("-")}
    assert path or set(words) <= {"-h", "--help"}, f"{command.label}: no sub-command {words[:1]}"
    assert named <= known, f"{command.label}: unknown options {sorted(named - known)}"
    if rest and _subcommands(parser):
        assert PLACEHOLDER.search(rest[0]) or rest[0].startswith("-"), (
            f"{command.label}: no sub-command {rest[0]!r} of cavchar {' '.join(path)}")


@pytest.mark.parametrize("command", ALL_COMMANDS, ids=lambda c: c.label)
def test_documented_command_parses(command: Command, capsys):
    if (command.synopsis or _names_only(command)
            or {"-h", "--help"} & set(command.words)):
        check_synopsis(command)  # a synopsis, or a bare sub-command named in the text
        return
    try:
        _parser().parse_args(command.words)
    except SystemExit as exc:
        err = capsys.readouterr().err
        pytest.fail(f"{command.label}: `cavchar {shlex.join(command.words)}` does not parse: "
                    f"{err} (exit {exc.code})")


def _names_only(command: Command) -> bool:
    """An inline mention of a sub-command (``cavchar log``), not a command to run."""
    return command.inline and _walk(command.words)[2] == []


def _run(words: list[str], cwd: Path) -> subprocess.CompletedProcess:
    env = {k: v for k, v in os.environ.items() if k != "CAVCHAR_LOG"}
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(REPO), env.get("PYTHONPATH")]))
    env["MPLBACKEND"] = "Agg"
    return subprocess.run([sys.executable, "-m", "cavchar.cli.main", *words], cwd=cwd,
                          env=env, capture_output=True, text=True, timeout=3600)


@pytest.mark.slow
@pytest.mark.parametrize("document", [d.relative_to(REPO).as_posix() for d in DOCUMENTS])
def test_documented_commands_run(document: str, tmp_path: Path):
    commands = [c for c in ALL_COMMANDS if c.document == document and not c.synopsis
                and not _names_only(c)]
    done: set[int] = set()
    failures: list[str] = []
    log: list[str] = []  # printed when the test fails (pytest shows captured output)
    files = list(FILES.get(document, []))
    # commands are written from the repository's folder: its examples are there too
    shutil.copytree(REPO / "examples", tmp_path / "examples")
    for command in commands:
        while files and files[0][0] < command.line:
            _, name, text = files.pop(0)
            (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
            (tmp_path / name).write_text(text, encoding="utf-8")
        if command.directive.skip:
            continue
        if id(command.directive) not in done:
            done.add(id(command.directive))
            for words in command.directive.setup:
                result = _run(words, tmp_path)
                assert result.returncode == 0, (
                    f"{command.label}: setup `cavchar {shlex.join(words)}` failed:\n"
                    f"{result.stderr[-2000:]}")
        result = _run(command.words, tmp_path)
        log.append(f"$ cavchar {shlex.join(command.words)}  -> {result.returncode}\n"
                   f"{result.stdout[-600:]}")
        if result.returncode != command.directive.exit_code:
            failures.append(f"{command.label}: `cavchar {shlex.join(command.words)}` exit "
                            f"{result.returncode}, documented {command.directive.exit_code}:\n"
                            f"{result.stdout[-1500:]}\n{result.stderr[-1500:]}")
        if "Traceback" in result.stderr:
            failures.append(f"{command.label}: traceback\n{result.stderr[-1500:]}")
    print("\n".join(log))
    assert not failures, "\n".join(failures)
