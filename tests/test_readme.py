"""The README tells the truth: every suite snippet passes `woodlot check` against the shipped
files, the command table lists every command and option the CLI has, and the names the
project has dropped appear nowhere a user reads them."""

from __future__ import annotations

import argparse
import re
import tomllib
from pathlib import Path

import pytest
import tomlkit

from harness.cli import main, parser
from harness.suite import load_suite

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")
# Fragments (a snippet without both datasets and strategies) are checked inside this small
# complete suite.
BASE = """
[suite]
name = "readme-fragment"

[protocol]
folds = 3
repeats = 1

[[dataset]]
name = "wine"
from = "sklearn"
load = "load_wine"

[[strategy]]
name = "forest"
method = "random-forest"
params = { n_estimators = 10 }
"""


def toml_snippets() -> list[str]:
    return re.findall(r"```toml\n(.*?)```", README, flags=re.S)


def as_suite(snippet: str) -> str:
    """A complete suite: the snippet itself, or the base suite with the snippet's tables
    replacing the base's (arrays of tables appended)."""
    if "[[dataset]]" in snippet and "[[strategy]]" in snippet:
        return snippet
    base, frag = tomlkit.parse(BASE), tomlkit.parse(snippet)
    for key, value in frag.items():
        if isinstance(value, tomlkit.items.AoT):
            for table in value:
                base[key].append(table)
        else:
            base[key] = value
    return tomlkit.dumps(base)


def test_the_readme_has_suite_snippets():
    assert len(toml_snippets()) >= 5


@pytest.mark.parametrize("index", range(len(toml_snippets())))
def test_every_suite_snippet_passes_check(index, tmp_path, capsys):
    """Each snippet is written where the README's paths expect it (a `suites/` folder beside
    `examples/`). An OpenML snippet is validated as text only (what `woodlot check` does
    before loading): the OpenML server is unreachable offline, and the OpenML source is
    tested against a seeded cache in tests/test_openml_*.py."""
    snippet = toml_snippets()[index]
    (tmp_path / "examples").symlink_to(ROOT / "examples")
    (tmp_path / "suites").mkdir()
    path = tmp_path / "suites" / f"snippet{index}.toml"
    path.write_text(as_suite(snippet), encoding="utf-8")
    tomllib.loads(path.read_text())  # valid TOML
    if 'from = "openml"' in snippet:
        suite = load_suite(path, expand=False)
        assert any(d.source == "openml" for d in suite.datasets)
        return
    code = main(["check", str(path)])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    assert "nothing was fitted" in captured.out


def _commands() -> dict[str, argparse.ArgumentParser]:
    sub = next(a for a in parser()._actions if isinstance(a, argparse._SubParsersAction))
    return dict(sub.choices)


def test_the_command_table_lists_every_command_and_option():
    section = README[README.index("## Commands"):]
    section = section[:section.index("\n## ", 1)]
    rows = [r for r in section.splitlines() if r.startswith("| `woodlot ")]
    missing = []
    for name, sub in _commands().items():
        row = next((r for r in rows if r.startswith(f"| `woodlot {name}")), None)
        if row is None:
            missing.append(f"command {name}")
            continue
        for action in sub._actions:
            for option in action.option_strings:
                if option.startswith("--") and option != "--help" and option not in row:
                    missing.append(f"{name} {option}")
    top = [o for a in parser()._actions for o in a.option_strings
           if o.startswith("--") and o != "--help"]
    missing += [f"woodlot {o}" for o in top if not any(f"woodlot {o}" in r for r in rows)]
    assert not missing, missing


@pytest.mark.parametrize("old", ["woodlot fetch", "woodlot compare", "woodlot scale",
                                 "[scaling]", "[measure]", "resampling =", "--tolerance",
                                 "harness.stats", "verdict_ranks", "verdict_tests"])
def test_dropped_names_appear_nowhere_a_user_reads(old):
    """The renames of this release (listed in CHANGELOG.md, the one place they may stand).
    The old protocol key is matched as a key: "nested resampling" is the trade's term."""
    places = [ROOT / "README.md", ROOT / "DEVELOPERS.md", *ROOT.glob("suites/*.toml"),
              *ROOT.glob("examples/*.toml"), *ROOT.glob("examples/*.py"),
              *ROOT.glob("benchmarks/*.py"), *(ROOT / "harness").rglob("*.py")]
    found = [str(p.relative_to(ROOT)) for p in places if old in p.read_text(encoding="utf-8")]
    assert not found, found


def test_the_statistics_snippet_runs():
    """The README's Python example of the statistics runs as written."""
    snippet = next(b for b in re.findall(r"```python\n(.*?)```", README, flags=re.S)
                   if "harness.analysis import" in b)
    exec(compile(snippet, "README.md", "exec"), {})
