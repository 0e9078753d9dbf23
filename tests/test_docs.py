"""The documentation runs: snippets, shown commands, shipped goals, in-repository references.

Every ```python block of docs/*.md and README.md is executed (a ```python slow block only
with CHIROPT_DOCS_SLOW=1); every indented `chiropt goal`/`chiropt evaluate ... --json` command
shown in the docs runs and exits 0; every goal in configs/ runs end to end with a tiny budget;
docs/cli.md lists every command and option; no tracked file cites a document outside the
repository or a tracker issue number; every ``*.md`` named anywhere is a file of the
repository and every ``docs/X.md §N`` cited anywhere exists as a heading.
"""

from __future__ import annotations

import copy
import json
import os
import re
import shlex
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PAGES = sorted((ROOT / "docs").glob("*.md")) + [ROOT / "README.md"]
FENCE = re.compile(r"^```python( slow)?\n(.*?)^```", re.S | re.M)


def _snippets():
    for page in PAGES:
        for i, m in enumerate(FENCE.finditer(page.read_text())):
            yield pytest.param(m.group(2), bool(m.group(1)), id=f"{page.name}-{i}")


@pytest.mark.parametrize("code,slow", list(_snippets()))
def test_python_snippet_runs(code, slow, monkeypatch):
    # common practice, no source: a documented snippet must run as shown
    if slow and not os.environ.get("CHIROPT_DOCS_SLOW"):
        pytest.skip("slow snippet; set CHIROPT_DOCS_SLOW=1")
    monkeypatch.chdir(ROOT)
    exec(compile(code, "<docs snippet>", "exec"), {"__name__": "__docs__"})


def _commands():
    seen = set()
    for page in PAGES:
        for line in page.read_text().splitlines():
            if not line.startswith("    chiropt "):  # indented command blocks
                continue
            s = line.strip()
            argv = shlex.split(s)
            cheap = argv[1] == "goal" or (argv[1] == "evaluate" and "--json" in argv)
            if cheap and s not in seen:
                seen.add(s)
                yield pytest.param(argv[1:], id=s[:60])


@pytest.mark.parametrize("argv", list(_commands()))
def test_shown_command_exits_zero(argv):
    # common practice, no source: the commands the docs show succeed
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    res = subprocess.run([sys.executable, "-m", "chiropt.cli", *argv], cwd=ROOT, env=env,
                         capture_output=True, text=True, timeout=600)
    assert res.returncode == 0, res.stderr


def test_docs_show_the_cheap_commands():
    # the brief: at least goal --explain, goal --check of shipped goals, evaluate --json
    shown = [" ".join(p.values[0]) for p in _commands()]
    assert "goal --explain" in shown
    assert any(s.startswith("goal --check configs/") for s in shown)
    assert any(s.startswith("evaluate configs/") and "--json" in s for s in shown)


def _tracked():
    out = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True)
    names = out.stdout.split() if out.returncode == 0 else []
    if not names:  # not a git checkout: scan the source folders
        names = [str(p.relative_to(ROOT)) for d in ("chiropt", "tests", "benchmarks", "docs",
                                                     "configs") for p in (ROOT / d).rglob("*")]
        names += ["README.md", "DEVELOPERS.md", "pyproject.toml"]
    return [n for n in names if n.endswith((".py", ".md", ".yaml", ".toml", ".txt"))
            and (ROOT / n).is_file()]


OUTSIDE = re.compile(r"PHYSICS\.md|FORMULAS\.md|CONTRACT\.md|ARCHITECTURE\.md|STYLE\.md"
                     r"|(?<![\w-])shared/|\b[Ii]ssues? ?[0-9]|\b[Ii]ssue:|(?<![\w&])#[0-9]{1,4}\b")


def test_no_reference_outside_the_repository():
    # common practice, no source: the repository carries its own references
    me = Path(__file__).name
    bad = [f"{n}:{i}: {line.strip()}" for n in _tracked() if not n.endswith(me)
           for i, line in enumerate((ROOT / n).read_text(errors="replace").splitlines(), 1)
           if OUTSIDE.search(line)]
    assert not bad, "\n".join(bad)


def test_the_scans_cover_code_tests_benchmarks_docs_and_readme():
    # the reference scans below read every tracked source and documentation file
    names = _tracked()
    for folder in ("chiropt/", "tests/", "benchmarks/", "docs/", "configs/"):
        assert any(n.startswith(folder) and n.endswith((".py", ".md", ".yaml"))
                   for n in names), folder
    assert {"README.md", "DEVELOPERS.md", "pyproject.toml"} <= set(names)


def test_cited_markdown_files_exist():
    # every *.md named in code, tests and docs (with its folders, if given) is a file of the
    # repository, from its root or from docs/
    md = re.compile(r"(?<![\w./-])((?:[\w.-]+/)*[\w.-]+\.md)\b")
    names = {(n, m) for n in _tracked() if not n.endswith(Path(__file__).name)
             for m in md.findall((ROOT / n).read_text())}
    missing = sorted(f"{n}: {m}" for n, m in names
                     if not ((ROOT / m).is_file() or (ROOT / "docs" / m).is_file()))
    assert not missing, missing


def test_cited_repository_files_exist():
    # every chiropt/, tests/, benchmarks/, configs/ or docs/ file named anywhere exists
    path = re.compile(r"(?<![\w./-])((?:chiropt|tests|benchmarks|configs|docs)/[\w./-]*\w"
                      r"\.(?:py|yaml|md|csv))\b")
    me = Path(__file__).name
    missing = sorted(f"{n}: {m}" for n in _tracked() if not n.endswith(me)
                     for m in path.findall((ROOT / n).read_text()) if not (ROOT / m).is_file())
    assert not missing, missing


def _headings(page: Path) -> set[int]:
    return {int(n) for n in re.findall(r"^#+ §(\d+)\b", page.read_text(), re.M)}


def test_cited_sections_exist():
    # every "docs/X.md §N, §M" cited in a tracked file is a heading of that page
    cite = re.compile(r"docs/([\w-]+\.md) (§\d+(?:(?:, |-)§\d+)*)")
    bad = []
    for n in _tracked():
        for page, secs in cite.findall((ROOT / n).read_text()):
            have = _headings(ROOT / "docs" / page) if (ROOT / "docs" / page).is_file() else set()
            bad += [f"{n}: docs/{page} §{s}" for s in re.findall(r"§(\d+)", secs)
                    if int(s) not in have]
    assert not bad, bad


def test_every_page_is_linked_from_the_indexes():
    # common practice, no source: docs/README.md lists every page, README.md the safety page
    index = (ROOT / "docs" / "README.md").read_text()
    pages = [p.name for p in (ROOT / "docs").glob("*.md") if p.name != "README.md"]
    assert [n for n in pages if f"]({n})" not in index] == []
    readme = (ROOT / "README.md").read_text()
    assert "](docs/README.md)" in readme and "](docs/safety.md)" in readme


def test_goal_reference_keys_are_documented():
    # every top-level key of `chiropt goal --explain` appears in docs/goals.md
    from chiropt.goals.schema import EXPLAIN

    keys = set(re.findall(r"^``(\w+)``", EXPLAIN, re.M))
    assert {"design", "variables", "objectives"} <= keys
    text = (ROOT / "docs" / "goals.md").read_text()
    assert [k for k in keys if f"`{k}`" not in text] == []



# --- every shipped goal runs end to end with a tiny budget --------------------------------

GOALS = sorted(p for p in (ROOT / "configs").glob("*.yaml")
               if {"variables:", "objectives:"} <= set(p.read_text().split()))
TINY_EXPLORE = {"samples": 3, "wavelength_points": 3, "keep": 1}


def _tiny(data: dict, materials: int = 1) -> dict:
    """The goal with its first material(s) only, one short search, a tiny exploration, two
    robust samples over two cone directions and two band points, no confirmation stage."""
    data = copy.deepcopy(dict(data))
    if isinstance(data.get("materials"), list):
        data["materials"] = data["materials"][:materials]
    search = {k: v for k, v in (data.get("search") or {}).items() if k != "confirm"}
    if len(data["objectives"]) > 1:
        front = dict(search.get("front") or {})
        search["front"] = {**front, "points": 3 if front.get("method") == "weighted-sum" else 2}
    search.update(starts=1, max_evals_per_start=2,
                  explore={**(search.get("explore") or {}), **TINY_EXPLORE})
    data["search"] = search
    data["budget"] = {"evaluations": 40}
    for item in [*data.get("objectives", []), *data.get("constraints", [])]:
        if isinstance(item, dict) and isinstance(item.get("robust"), dict):
            item["robust"].update(samples=2, polar_points=1, azimuth_points=2, band_points=2)
    return data


@pytest.fixture(scope="module")
def goal_runs(tmp_path_factory):
    """Runs a shipped goal once, tiny, into a folder laid out like the repository's:
    ``configs/`` (paths in a goal are relative to its file) beside ``runs/``."""
    from chiropt.export import read_front_csv
    from chiropt.goals.schema import goal_from_dict
    from chiropt.run import run_goal
    from chiropt.yamlio import load_yaml

    tmp = tmp_path_factory.mktemp("goals")
    shutil.copytree(ROOT / "configs", tmp / "configs")
    done: dict[str, tuple] = {}

    def run(path: Path):
        if path.name not in done:
            # the quickstart keeps both materials: the docs show commands on both folders
            data = _tiny(load_yaml(path), materials=2 if path.name == "quickstart.yaml" else 1)
            goals = goal_from_dict(data, base_dir=tmp / "configs", default_name=path.stem)
            summaries = [run_goal(g, out=tmp / "runs", workers=0, progress=False)
                         for g in goals]
            done[path.name] = [(s, read_front_csv(s.run_dir / "front.csv")[1])
                               for s in summaries]
        return done[path.name]
    run.root = tmp
    return run


@pytest.mark.parametrize("path", GOALS, ids=[p.name for p in GOALS])
def test_shipped_goal_runs_with_a_tiny_budget(path, goal_runs):
    # common practice, no source: every example goal the repository ships runs end to end
    if "starts_from:" in path.read_text():  # a second stage: run the goals before it first
        for before in GOALS:
            if before != path and "starts_from:" not in before.read_text():
                goal_runs(before)
    for summary, rows in goal_runs(path):
        assert summary.status == "complete", summary.status
        assert len(rows) >= 1
        assert (summary.run_dir / "summary.json").is_file() and summary.candidates


# the other commands the docs show, in an order where each finds what it reads: on a copy
# of configs/ beside the tiny quickstart runs/ (Monte Carlo samples cut to 4 and candidates
# to 2 to stay fast)
KIND_ORDER = ("evaluate", "inspect", "robustness", "export", "report", "compare")


def _heavy_commands():
    seen = set()
    for page in PAGES:
        for line in page.read_text().splitlines():
            s = line.strip()
            argv = shlex.split(s) if line.startswith("    chiropt ") else []
            if (argv and argv[1] in KIND_ORDER and "--json" not in argv and s not in seen):
                seen.add(s)
                yield argv[1:]


# a Fourier solve at 97 and again at 197 harmonics: about a minute on 2 cores
SLOW_COMMANDS = {"evaluate configs/silicon-disks-design.yaml --validity"}
SLOW = pytest.mark.skipif(not os.environ.get("CHIROPT_DOCS_SLOW"),
                          reason="slow command; set CHIROPT_DOCS_SLOW=1")
HEAVY = [pytest.param(a, id=" ".join(a)[:60],
                      marks=[SLOW] if " ".join(a) in SLOW_COMMANDS else [])
         for a in sorted(_heavy_commands(), key=lambda a: KIND_ORDER.index(a[0]))]


@pytest.mark.parametrize("argv", HEAVY)
def test_shown_commands_on_runs_exit_zero(argv, goal_runs):
    # common practice, no source: the commands the docs show succeed as shown
    goal_runs(ROOT / "configs" / "quickstart.yaml")
    cut = {"--samples": "4", "--top": "2"}
    argv = [cut.get(argv[i - 1], a) if i else a for i, a in enumerate(argv)]
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    res = subprocess.run([sys.executable, "-m", "chiropt.cli", *argv], cwd=goal_runs.root,
                         env=env, capture_output=True, text=True, timeout=600)
    assert res.returncode == 0, res.stderr


def test_every_command_and_option_is_in_the_cli_page():
    # common practice, no source: docs/cli.md §11 lists every command with all its options
    import argparse

    from chiropt.cli import build_parser

    text = (ROOT / "docs" / "cli.md").read_text()
    section = text[text.index("## §11"):]
    bullets = {m.group(1): m.group(0) for m in
               re.finditer(r"^- `chiropt (\w+).*?(?=^- |\Z)", section, re.S | re.M)}
    (sub,) = [a for a in build_parser()._actions if isinstance(a, argparse._SubParsersAction)]
    missing = [name for name in sub.choices if name not in bullets]
    missing += [f"{name} {opt}" for name, sp in sub.choices.items() if name in bullets
                for b in sp._actions for opt in b.option_strings
                if opt.startswith("--") and opt != "--help" and f"`{opt}" not in bullets[name]]
    assert not missing, missing


def test_every_key_evaluate_json_prints_is_defined(tmp_path):
    # common practice, no source: each name `chiropt evaluate --json` prints is explained on
    # the command-line page (docs/cli.md §2-§3, pointing on to docs/theory.md §11-§18)
    design = tmp_path / "d.yaml"
    text = (ROOT / "configs" / "near-field-design.yaml").read_text()
    design.write_text(re.sub(r"wavelength_nm: \{[^}]*\}", "wavelength_nm: [650, 700]", text))
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    res = subprocess.run([sys.executable, "-m", "chiropt.cli", "evaluate", str(design),
                          "--json", "--at-nm", "700"], cwd=ROOT, env=env,
                         capture_output=True, text=True, timeout=600)
    assert res.returncode == 0, res.stderr
    out = json.loads(res.stdout)
    keys = set(out) | set(out["metrics"]) | set(out["orders"][0])
    page = (ROOT / "docs" / "cli.md").read_text()
    missing = [k for k in sorted(keys)
               if not any(n in page for n in (f"`{k}`", f"`metrics.{k}`", f'`"{k}"`'))]
    assert len(keys) > 20 and missing == []


def test_goal_fragments_shown_are_those_of_the_shipped_goals():
    # common practice, no source: the YAML shown in docs/goals.md §2 is copied from configs/
    shipped = {ln.strip() for g in GOALS for ln in g.read_text().splitlines()}
    lines = [ln.strip() for ln in (ROOT / "docs" / "goals.md").read_text().splitlines()
             if ln.startswith("      ") and ln.strip().startswith(("- {", "lattice.", "front:"))]
    assert len(lines) >= 8 and [ln for ln in lines if ln not in shipped] == []
