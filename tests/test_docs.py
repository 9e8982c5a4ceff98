"""The documentation cannot go stale: checks of README.md, DEVELOPERS.md and docs/.

What is checked, and why:

- every command and every option that ``--help`` prints is named in docs/,
  so a new or renamed option fails here until the docs describe it; and every
  option the docs name exists, so an old name cannot linger;
- README.md stays short (at most 15 kB) and DEVELOPERS.md too (at most 10 kB);
- the README's two commands are the ones the CI script runs (.ci/run), so the
  newcomer's first commands are tested on every push;
- the safety cautions sit within the README's first 60 lines (the first screen);
- every relative link in README.md and docs/*.md points to a file that exists.

The command tree is read from the argparse parsers themselves (their
``_actions``, and ``choices`` of each sub-parser action), not from a list
kept by hand. To point the walk at another parser, edit ``GROUP_PARSERS``.
"""

from __future__ import annotations

import argparse
import importlib
import re
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
DOCS = REPO / "docs"

#: The parsers whose commands and options must be documented: (command words,
#: "module:function" returning an argparse.ArgumentParser). With one
#: ``voidcube`` command (plan/voidcube.py) each group has its own parser;
#: before it, three console scripts had theirs. To point the walk at another
#: parser, edit these lists.
GROUP_PARSERS = [
    ("voidcube plan", "plan.cli:build_parser"),
    ("voidcube reconstruct", "reconstruct.cli:build_parser"),
    ("voidcube demo", "plan.demo:build_parser"),
]
OLD_PARSERS = [
    ("voidcube", "plan.demo:build_parser"),
    ("reconstruct", "reconstruct.cli:build_parser"),
    ("plan", "plan.cli:build_parser"),
]


def command_parsers():
    """The parsers to walk: the groups of ``voidcube`` when it exists, else the old scripts."""
    if not (REPO / "plan" / "voidcube.py").exists():  # this checkout's, not an installed copy's
        return OLD_PARSERS
    groups = importlib.import_module("plan.voidcube").GROUPS
    assert set(groups) == {words.split()[1] for words, _ in GROUP_PARSERS}, (
        f"voidcube has the groups {sorted(groups)}: add the new group's parser to GROUP_PARSERS")
    return GROUP_PARSERS


#: Options every argparse parser has; they need no documentation of their own.
GENERIC_OPTIONS = {"-h", "--help"}

README_MAX_BYTES = 15_000
DEVELOPERS_MAX_BYTES = 10_000
CAUTION_LINES = 60

#: One phrase per caution of the house rules (lower case).
CAUTION_PHRASES = [
    "not a guarantee",
    "probe drilling",
    "local regulations",
    "geotechnical engineer",
    "licensed practice",
    "radio-spectrum rules",
    "detonator",
]


def _load_parser(target: str) -> argparse.ArgumentParser:
    module, function = target.split(":")
    return getattr(importlib.import_module(module), function)()


def walk_parser(parser: argparse.ArgumentParser, path: tuple[str, ...]):
    """Yield (command path, option string or None) for every command and option under ``parser``.

    A command yields ``(path, None)`` once; each of its options yields
    ``(path, option)``. Sub-commands are found through the parser's
    ``argparse._SubParsersAction`` and its ``choices``.
    """
    yield path, None
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                yield from walk_parser(sub, path + (name,))
        else:
            for option in action.option_strings:
                if option not in GENERIC_OPTIONS:
                    yield path, option


def command_tree():
    """Every (command path, option) of every parser of :func:`command_parsers`."""
    items = []
    for words, target in command_parsers():
        items.extend(walk_parser(_load_parser(target), tuple(words.split())))
    return items


def docs_text() -> str:
    return "\n".join(p.read_text(encoding="utf-8") for p in sorted(DOCS.rglob("*.md")))


def _named(text: str, word: str) -> bool:
    """``word`` appears in ``text`` not as part of a longer name (``--site`` is not ``--site-x``)."""
    return re.search(rf"(?<![\w-]){re.escape(word)}(?![\w-])", text) is not None


def _command_words(path: tuple[str, ...]) -> str:
    """How a command is named in the docs: its last two words (``plan mesh``,
    ``reconstruct check-picks``), or the program itself."""
    return " ".join(path[-2:])


_TREE = command_tree()
_COMMANDS = sorted({path for path, option in _TREE if option is None and len(path) > 1})
_OPTIONS = sorted({option for _, option in _TREE if option is not None})


@pytest.mark.parametrize("path", _COMMANDS, ids=lambda p: " ".join(p))
def test_every_command_is_documented(path):
    assert _named(docs_text(), _command_words(path)), (
        f"'{' '.join(path)}' is a command (--help lists it) but docs/ never names "
        f"'{_command_words(path)}': describe it in the page of its role")


@pytest.mark.parametrize("option", _OPTIONS)
def test_every_option_is_documented(option):
    commands = sorted(" ".join(p) for p, o in _TREE if o == option)
    assert _named(docs_text(), option), (
        f"option {option} (of {', '.join(commands)}) is not named anywhere in docs/: describe it")


#: Options of other programs that the docs show (dask's workers).
OUTSIDE_OPTIONS = {"--nthreads", "--nworkers"}


def test_every_documented_option_exists():
    # The reverse check: an option renamed or removed must leave the docs too.
    pages = [REPO / "README.md", REPO / "demo_site" / "README.md", *sorted(DOCS.glob("*.md"))]
    text = "\n".join(p.read_text(encoding="utf-8") for p in pages)
    named = set(re.findall(r"(?<![\w-])--[a-z][a-z0-9-]*", text))
    unknown = sorted(named - set(_OPTIONS) - OUTSIDE_OPTIONS - GENERIC_OPTIONS)
    assert not unknown, f"the docs name options that no command has: {unknown}; rename or remove them"


def test_walker_finds_subcommands_and_options():
    # The walk must see nested commands, else the tests above check nothing.
    parser = argparse.ArgumentParser(prog="top")
    groups = parser.add_subparsers()
    sub = groups.add_parser("group").add_subparsers().add_parser("job")
    sub.add_argument("--an-option")
    tree = list(walk_parser(parser, ("top",)))
    assert (("top", "group", "job"), None) in tree
    assert (("top", "group", "job"), "--an-option") in tree
    assert len(_COMMANDS) > 5 and len(_OPTIONS) > 20


def test_readme_is_short():
    size = (REPO / "README.md").stat().st_size
    assert size <= README_MAX_BYTES, f"README.md is {size} bytes; keep it to {README_MAX_BYTES} and move detail to docs/"


def test_developers_guide_is_short():
    size = (REPO / "DEVELOPERS.md").stat().st_size
    assert size <= DEVELOPERS_MAX_BYTES, (
        f"DEVELOPERS.md is {size} bytes; keep it to {DEVELOPERS_MAX_BYTES} and move detail to the docstrings")


def _readme_commands() -> list[str]:
    """The first two fenced code blocks of the README, one command each."""
    blocks = re.findall(r"^```[^\n]*\n(.*?)^```", (REPO / "README.md").read_text(encoding="utf-8"), re.M | re.S)
    return [b.strip() for b in blocks[:2]]


def _ci_commands() -> list[str]:
    lines = (REPO / ".ci" / "run").read_text(encoding="utf-8").splitlines()
    return [line.strip() for line in lines if line.strip().startswith("python3 -m pip install")]


def test_readme_commands_are_the_ones_ci_runs():
    ci = _ci_commands()
    assert len(ci) == 2, f".ci/run should run two install commands, found {ci}"
    assert _readme_commands() == ci, "the README's first two code blocks must be .ci/run's two commands, verbatim"


def test_cautions_are_on_the_readme_first_screen():
    head = "\n".join((REPO / "README.md").read_text(encoding="utf-8").splitlines()[:CAUTION_LINES]).lower()
    head = re.sub(r"\s+", " ", head)
    missing = [phrase for phrase in CAUTION_PHRASES if phrase not in head]
    assert not missing, f"cautions missing from the README's first {CAUTION_LINES} lines: {missing}"


def _markdown_files():
    return [REPO / "README.md", REPO / "DEVELOPERS.md", REPO / "demo_site" / "README.md", *sorted(DOCS.glob("*.md"))]


@pytest.mark.parametrize("page", _markdown_files(), ids=lambda p: str(p.relative_to(REPO)))
def test_relative_links_point_to_files(page):
    text = page.read_text(encoding="utf-8")
    broken = []
    for target in re.findall(r"\]\(([^)\s]+)\)", text):
        if re.match(r"[a-z]+:", target):
            continue  # a web address
        path, _, anchor = target.partition("#")
        linked = (page.parent / path) if path else page
        if not linked.exists():
            broken.append(target)
        elif anchor and linked.suffix == ".md" and anchor not in _anchors(linked):
            broken.append(target)
    assert not broken, f"{page.relative_to(REPO)}: links to missing files or headings: {broken}"


def _anchors(page: Path) -> set[str]:
    """The anchors of a Markdown page's headings, as GitHub makes them
    (lower case, punctuation dropped, spaces to hyphens)."""
    text = re.sub(r"^```.*?^```", "", page.read_text(encoding="utf-8"), flags=re.M | re.S)
    headings = re.findall(r"^#{1,6}\s+(.*?)\s*$", text, re.M)
    return {re.sub(r"[^\w\- ]", "", h.lower().replace("`", "")).replace(" ", "-") for h in headings}


def test_demo_figures_page_is_generated():
    # Figures of the demo are quoted only from this page, which a script writes.
    page = DOCS / "demo_figures.md"
    assert page.exists(), "run python3 benchmarks/demo_figures.py to write docs/demo_figures.md"
    first = page.read_text(encoding="utf-8").splitlines()[0]
    assert "Generated by `python3 benchmarks/demo_figures.py`" in first


def _code_blocks(text: str) -> list[str]:
    return re.findall(r"^```[^\n]*\n(.*?)^```", text, re.M | re.S)


def test_the_input_check_example_prints_what_the_docs_quote(tmp_path, capsys):
    # The minimal example of docs/formats.md, checked by the command itself;
    # its printed output is quoted in docs/processing.md.
    from reconstruct import cli

    section = (DOCS / "formats.md").read_text(encoding="utf-8").split("## A minimal example", 1)[1]
    site, nodes, picks = _code_blocks(section.split("\n## ", 1)[0])[:3]
    for name, text in (("site.yaml", site), ("nodes.csv", nodes), ("picks.csv", picks)):
        (tmp_path / name).write_text(text, encoding="utf-8")
    commands = {words[-1] for words, option in walk_parser(cli.build_parser(), ("reconstruct",)) if option is None}
    command = "check-inputs" if "check-inputs" in commands else "check"
    code = cli.main([command, "--site", str(tmp_path / "site.yaml"), "--nodes", str(tmp_path / "nodes.csv"),
                     "--picks", str(tmp_path / "picks.csv")])
    printed = capsys.readouterr().out.strip()
    processing = (DOCS / "processing.md").read_text(encoding="utf-8")
    quoted = _code_blocks(processing.split("## Checking the inputs", 1)[1])[0].strip()
    assert code == 0
    assert printed == quoted, f"docs/processing.md quotes\n{quoted}\nbut the command prints\n{printed}"


def _documented_command_lines() -> list[tuple[str, str]]:
    """(page, line) for every line of a code block in the docs that runs ``voidcube ...``."""
    lines = []
    for page in [REPO / "README.md", REPO / "demo_site" / "README.md", *sorted(DOCS.glob("*.md"))]:
        for block in _code_blocks(page.read_text(encoding="utf-8")):
            for line in block.splitlines():
                line = line.split("#", 1)[0].strip()
                if line.startswith("voidcube ") and "&&" not in line:
                    lines.append((str(page.relative_to(REPO)), line))
    return lines


def _parser_for(words: list[str]):
    """The parser and the arguments it takes for a command line ``voidcube GROUP ...``."""
    group = words[1]
    for program, target in command_parsers():
        program_words = program.split()
        if program_words[1:] == [group]:  # one voidcube command: a parser per group
            return _load_parser(target), words[2:]
        if program_words == [group]:  # the old scripts `plan` and `reconstruct`
            return _load_parser(target), words[2:]
        if program_words == ["voidcube"] and group == "demo":  # the old `voidcube demo`
            return _load_parser(target), words[1:]
    raise AssertionError(f"no parser for the group {group!r}")


@pytest.mark.parametrize("page, line", _documented_command_lines())
def test_documented_command_lines_parse(page, line, capsys):
    # Every command shown in the docs is accepted by the real parser (nothing runs).
    import shlex

    parser, argv = _parser_for(shlex.split(line))
    try:
        parser.parse_args(argv)
    except SystemExit:
        raise AssertionError(f"{page}: `{line}` is refused by the parser: {capsys.readouterr().err.strip()}") from None
