"""Runs as processes: workers die with the run, the folder lock, one Ctrl-C stops all,
output places, nothing written by rejected runs, no WAL files left, resume identity,
failed searches, merged fronts and truthful wavelength labels.

These are behaviour checks of operating-system mechanisms (signals, file locks, SQLite's
WAL files): # common practice, no source.
"""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time
from dataclasses import replace
from pathlib import Path

import numpy as onp
import pytest

from chiropt.cli import main
from chiropt.design import load_design
from chiropt.export import read_front_csv
from chiropt.goals import GoalProblem, load_goal
from chiropt.run import Progress, merge_coinciding, merge_tolerance, run_goal, run_goal_file
from chiropt.sensitivity import compute_quantities
from chiropt.store import EvaluationStore
from scenarios import DIPOLES, SPHERE_ON_GLASS

ROOT = Path(__file__).resolve().parents[1]
ENV = dict(os.environ, PYTHONPATH=str(ROOT), OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1")

BASE = SPHERE_ON_GLASS + DIPOLES

# one objective, derivative-free, long enough to be caught while running (16 starts: some
# 20 s of a run that the tests interrupt after a few evaluations, even on a loaded machine)
LONG = BASE + """\
variables:
  particles[0].radius_nm: {min: 50, max: 110}
  lattice.period_nm: {min: 300, max: 520}
objectives:
  - {maximize: g, at_nm: 700}
search: {algorithm: COBYLA, starts: 16, max_evals_per_start: 400, xtol_rel: 0, ftol_rel: 0}
seed: 3
"""

SMALL = BASE + """\
variables:
  particles[0].radius_nm: {min: 50, max: 110}
  lattice.period_nm: {min: 300, max: 520}
objectives:
  - {maximize: g, at_nm: 700}
search: {algorithm: COBYLA, starts: 2, max_evals_per_start: 6}
seed: 3
"""


def _write(folder: Path, text: str, name: str = "g.yaml") -> Path:
    p = folder / name
    p.write_text(textwrap.dedent(text))
    return p


def _count(db: Path, table: str = "evaluations") -> int:
    """Rows of ``table`` in a run's store, read-only (0 while it does not exist yet)."""
    if not db.exists():
        return 0
    try:
        conn = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=1.0)
        try:
            return int(conn.execute(f"SELECT COUNT(*) FROM {table}").fetchone()[0])
        finally:
            conn.close()
    except sqlite3.Error:
        return 0


def _start(goal_file: Path, out: Path, *extra: str, cwd: Path | None = None):
    return subprocess.Popen([sys.executable, "-m", "chiropt.cli", "run", str(goal_file),
                             "--out", str(out), "--quiet", *extra], env=ENV, cwd=cwd,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def _wait_for(cond, timeout=90.0, proc=None):
    t0 = time.time()
    while not cond():
        if proc is not None and proc.poll() is not None:
            raise AssertionError(f"the run ended early: {proc.communicate()}")
        if time.time() - t0 > timeout:
            raise AssertionError("timed out")
        time.sleep(0.05)


def _alive(pid: int) -> bool:
    """A live process (a zombie, dead but not reaped, counts as gone); Linux /proc."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return False
    return stat.rsplit(")", 1)[1].split()[0] != "Z"


def _worker_pids(run_dir: Path) -> list[int]:
    log = run_dir / "run.log"
    if not log.exists():
        return []
    for line in log.read_text().splitlines():
        if "workers: pid " in line:
            text = line.split("workers: pid ", 1)[1].split(" (parent")[0]
            return [int(p) for p in text.split(", ")]
    return []


def _no_wal(run_dir: Path) -> bool:
    return not any((run_dir / f"evaluations.sqlite{s}").exists() for s in ("-wal", "-shm"))


linux = pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs /proc")


@linux
def test_sigkill_of_the_run_kills_its_workers_and_the_lock_is_taken_over(tmp_path):
    goal_file = _write(tmp_path, LONG)
    out = tmp_path / "runs"
    run_dir = out / "g-Si"
    proc = _start(goal_file, out, "--workers", "2")
    _wait_for(lambda: len(_worker_pids(run_dir)) == 2 and _count(run_dir / "evaluations.sqlite")
              >= 4, proc=proc)
    pids = _worker_pids(run_dir)
    assert all(_alive(p) for p in pids)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    t0 = time.time()
    while any(_alive(p) for p in pids) and time.time() - t0 < 5.0:
        time.sleep(0.05)
    assert not any(_alive(p) for p in pids), "a worker outlived its killed run"
    # nothing writes any more
    n = _count(run_dir / "evaluations.sqlite")
    time.sleep(1.0)
    assert _count(run_dir / "evaluations.sqlite") == n
    # the dead run's lock is stale: a new run takes it over (and is not refused)
    (goal,) = load_goal(_write(tmp_path, LONG.replace("max_evals_per_start: 400",
                                                      "max_evals_per_start: 3"), "g.yaml"))
    # a smaller cap than the killed run's: the rows beyond it stay in the store
    s = run_goal(goal, out=out, workers=0, progress=False)
    assert s.status == "complete"
    assert "took over the lock" in (run_dir / "run.log").read_text()


@linux
def test_second_run_on_a_busy_folder_is_refused_naming_the_pid(tmp_path):
    goal_file = _write(tmp_path, LONG)
    out = tmp_path / "runs"
    run_dir = out / "g-Si"
    first = _start(goal_file, out, "--workers", "0")
    try:
        _wait_for(lambda: _count(run_dir / "evaluations.sqlite") >= 2, proc=first)
        second = subprocess.run([sys.executable, "-m", "chiropt.cli", "run", str(goal_file),
                                 "--out", str(out), "--workers", "0", "--quiet"], env=ENV,
                                capture_output=True, text=True, timeout=120)
        assert second.returncode == 2
        lines = second.stderr.strip().splitlines()
        assert len(lines) == 1 and f"pid {first.pid}" in lines[0], second.stderr
        assert first.poll() is None  # the first run goes on untouched
    finally:
        first.send_signal(signal.SIGKILL)
        first.wait()


@linux
def test_one_sigint_stops_every_material_with_130_and_resume_completes(tmp_path):
    text = LONG.replace("seed: 3\n", "seed: 3\nmaterials: [Si, TiO2]\n")
    goal_file = _write(tmp_path, text)
    out = tmp_path / "runs"
    run_dir = out / "g-Si"
    proc = _start(goal_file, out, "--workers", "1")
    _wait_for(lambda: _worker_pids(run_dir) and _count(run_dir / "evaluations.sqlite") >= 3,
              proc=proc)
    pids = _worker_pids(run_dir)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert not (out / "g-TiO2").exists()  # the next material never started
    assert not any(_alive(p) for p in pids)
    assert _no_wal(run_dir)
    # resume (a smaller budget keeps the test short): every material completes
    short = text.replace("max_evals_per_start: 400", "max_evals_per_start: 8")
    summaries = run_goal_file(_write(tmp_path, short), out=out, workers=0, progress=False)
    assert [s.status for s in summaries] == ["complete", "complete"]
    assert (out / "g-compare.png").exists()


def _ignore_sigint():   # as a non-interactive shell starts a background job
    signal.signal(signal.SIGINT, signal.SIG_IGN)


@linux
def test_sigint_stops_a_run_started_with_sigint_ignored(tmp_path):
    # common practice, no source: an ignored signal stays ignored across exec (POSIX
    # execve), so a run started as a background job must take SIGINT back itself
    out = tmp_path / "runs"
    proc = subprocess.Popen([sys.executable, "-m", "chiropt.cli", "run",
                             str(_write(tmp_path, LONG)), "--out", str(out), "--quiet",
                             "--workers", "0"], env=ENV, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, preexec_fn=_ignore_sigint)
    _wait_for(lambda: _count(out / "g-Si" / "evaluations.sqlite") >= 3, proc=proc)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert "interrupted" in err


def test_outputs_go_to_the_current_folder(tmp_path, monkeypatch, capsys):
    goal_file = _write(tmp_path, SMALL)
    design = tmp_path / "designs" / "d.yaml"
    design.parent.mkdir()
    design.write_text("lattice: {kind: square, period_nm: 400}\n"
                      "particles: [{radius_nm: 60, material: {n: 3.5}}]\n"
                      "illumination: {wavelength_nm: [650, 700]}\n")
    here = tmp_path / "work"
    here.mkdir()
    monkeypatch.chdir(here)
    assert main(["run", str(goal_file), "--workers", "0", "--quiet"]) == 0
    assert (here / "runs" / "g-Si" / "front.csv").exists()
    assert not (ROOT / "runs" / "g-Si").exists()
    assert main(["evaluate", str(design)]) == 0
    assert (here / "d-spectrum.png").exists() and not (design.parent / "d-spectrum.png").exists()


TWO_MATERIALS_ONE_BAD = (SMALL.replace("seed: 3\n", "seed: 3\nmaterials: [TiO2, Si]\n")
                         .replace("wavelength_nm: 700}", "wavelength_nm: 1500}")
                         .replace("at_nm: 700", "at_nm: 1500"))  # Si data ends at 1450 nm


@pytest.mark.parametrize("text, args", [
    (SMALL, ["--workers", "-1"]),
    (SMALL.replace("at_nm: 700}", "at_nm: 1600}"), []),
    (SMALL.replace("material: Si}", "material: Unobtainium}"), []),
    (SMALL.replace("{min: 50, max: 110}", "{min: -10, max: 110}"), []),  # radius > 0
    (TWO_MATERIALS_ONE_BAD, []),  # the good first material gets no folder either
], ids=["workers", "wavelength", "material", "bound", "second-material"])
def test_rejected_runs_leave_no_files(tmp_path, text, args, capsys):
    goal_file = _write(tmp_path, text)
    out = tmp_path / "runs"
    assert main(["run", str(goal_file), "--out", str(out), "--workers", "0", "--quiet",
                 *args]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("chiropt: invalid input")
    assert not out.exists()


@pytest.mark.parametrize("workers", [0, 1])
def test_no_wal_files_after_a_run(tmp_path, workers):
    (goal,) = load_goal(_write(tmp_path, SMALL))
    s = run_goal(goal, out=tmp_path / "runs", workers=workers, progress=False)
    assert s.status == "complete" and _no_wal(s.run_dir)
    assert EvaluationStore(s.run_dir / "evaluations.sqlite").count() == s.n_evaluations


def test_resume_accepts_a_new_description_and_a_grown_budget(tmp_path):
    (small,) = load_goal(_write(tmp_path, SMALL))
    s1 = run_goal(small, out=tmp_path / "runs", workers=0, progress=False)
    first = {(r.stage, r.start, r.seq): r.x.tolist()
             for r in EvaluationStore(s1.run_dir / "evaluations.sqlite").records()}
    grown = _write(tmp_path, SMALL.replace("max_evals_per_start: 6", "max_evals_per_start: 12")
                   .replace("seed: 3", "seed: 3\ndescription: a new text"))
    (goal,) = load_goal(grown)
    s2 = run_goal(goal, out=tmp_path / "runs", workers=0, progress=False)
    assert s2.status == "complete" and s2.n_evaluations > s1.n_evaluations
    after = {(r.stage, r.start, r.seq): r.x.tolist()
             for r in EvaluationStore(s2.run_dir / "evaluations.sqlite").records()}
    assert all(after[k] == v for k, v in first.items())  # extended, nothing recomputed
    # a changed goal (not a budget) is still refused
    with pytest.raises(Exception, match="different goal"):
        run_goal(replace(goal, seed=4), out=tmp_path / "runs", workers=0, progress=False)


def test_a_search_that_dies_is_a_failed_search(tmp_path, monkeypatch, capsys):
    import chiropt.run as run

    real = run._search

    def dies(task):
        if task.index == 1:
            raise RuntimeError("simulated defect")
        return real(task)

    monkeypatch.setattr(run, "_search", dies)
    goal_file = _write(tmp_path, SMALL)
    assert main(["run", str(goal_file), "--out", str(tmp_path / "runs"), "--workers", "0",
                 "--quiet"]) == 1
    out = capsys.readouterr().out
    assert "failed: 1 of 2 searches failed" in out and "simulated defect" in out


def test_a_store_that_changes_under_the_report_is_not_complete(tmp_path, monkeypatch):
    import chiropt.run as run
    from chiropt.problem import Evaluation

    real = run.write_report

    def other_writer(run_dir, goal, **kw):
        summary = real(run_dir, goal, **kw)
        kw["store"].put("intruder", 0, 0, [80.0, 400.0], Evaluation.failed("elsewhere", 0))
        return summary

    monkeypatch.setattr(run, "write_report", other_writer)
    (goal,) = load_goal(_write(tmp_path, SMALL))
    s = run_goal(goal, out=tmp_path / "runs", workers=0, progress=False)
    assert s.status.startswith("failed: the store changed")


def test_merge_joins_designs_within_the_tolerance():
    (goal,) = load_goal_text(SMALL)
    tol = merge_tolerance(goal, onp.array([80.0, 400.0]))
    X = onp.array([[80.0, 400.0], [80.0 + 0.5 * tol[0], 400.0 - 0.5 * tol[1]],
                   [80.0 + 3 * tol[0], 400.0], [80.0, 400.0]])
    assert merge_coinciding(goal, X, [0, 1, 2, 3]) == [0, 2]


def load_goal_text(text):
    import tempfile

    with tempfile.TemporaryDirectory() as d:
        return load_goal(_write(Path(d), text))


TWO = BASE + """\
variables:
  particles[0].radius_nm: {min: 50, max: 110}
  lattice.period_nm: {min: 300, max: 520}
objectives:
  - {maximize: g, at_nm: 700}
  - {maximize: docp, at_nm: 700}
search:
  algorithm: SLSQP
  starts: 2
  max_evals_per_start: 8
  front: {method: epsilon-constraint, points: 3}
seed: 5
"""


def test_front_rows_are_distinct_and_progress_agrees(tmp_path):
    (goal,) = load_goal(_write(tmp_path, TWO))
    s = run_goal(goal, out=tmp_path / "runs", workers=0, progress=False)
    P = GoalProblem(goal)
    X = onp.array([[row[p] for p in P.paths] for row in s.front])
    for i in range(len(X)):
        for j in range(i):
            assert not onp.all(onp.abs(X[i] - X[j]) <= merge_tolerance(goal, X[j]))
    prog = Progress(str(s.run_dir / "evaluations.sqlite"), goal, ["front-0", "front-1"],
                    4 * 8 + 8, None)
    prog.poll()
    prog.finished.update(prog.tasks)
    assert len(prog.front) == len(s.front)
    assert prog.remaining() == (0, True)


def test_wavelength_variable_labels_are_truthful(tmp_path):
    text = SMALL.replace("  lattice.period_nm: {min: 300, max: 520}\n",
                         "  lattice.period_nm: {min: 300, max: 520}\n"
                         "  illumination.wavelength_nm: {min: 650, max: 800}\n")
    (goal,) = load_goal(_write(tmp_path, text))
    s = run_goal(goal, out=tmp_path / "runs", workers=0, progress=False)
    header, rows = read_front_csv(s.run_dir / "front.csv")
    assert "g@design-wavelength" in rows[0] and not any("700nm" in k for k in rows[0])
    for path in s.candidates:
        head = path.read_text()
        assert "illumination.wavelength_nm = " in head and "700nm" not in head
        row = rows[int(path.stem[1:])]
        wl = float(row["illumination.wavelength_nm"])
        design = load_design(path)
        assert onp.allclose(design.illumination.wavelength_nm, [wl])
        # the labelled value is g at the row's own wavelength (a fresh solve of the file)
        g = float(onp.real(compute_quantities(design)["g"][0]))
        assert abs(g - float(row["g@design-wavelength"])) <= 1e-9 * max(1.0, abs(g))


def _current_rows(run_dir: Path) -> dict:
    return {(r.stage, r.start, r.seq): r.x.tolist()
            for r in EvaluationStore(run_dir / "evaluations.sqlite").records()
            if ":" not in r.stage}


def test_a_front_extended_by_a_grown_budget_equals_a_fresh_run(tmp_path):
    # the anchors of a front move when their budget grows, so later searches change path:
    # their old rows are kept as superseded, and the current rows are a fresh run's
    (small,) = load_goal(_write(tmp_path, TWO.replace("max_evals_per_start: 8",
                                                      "max_evals_per_start: 3")))
    assert run_goal(small, out=tmp_path / "a", workers=0, progress=False).status == "complete"
    (goal,) = load_goal(_write(tmp_path, TWO))
    extended = run_goal(goal, out=tmp_path / "a", workers=0, progress=False)
    fresh = run_goal(goal, out=tmp_path / "b", workers=0, progress=False)
    assert extended.status == "complete"
    assert _current_rows(extended.run_dir) == _current_rows(fresh.run_dir)
    stages = {r.stage for r in EvaluationStore(extended.run_dir / "evaluations.sqlite").records()}
    assert any(st.startswith("superseded1:") for st in stages)  # the path did change


def _blas_threads(_):
    import chiropt.model  # noqa: F401  (loads every linear-algebra library a task uses)
    from threadpoolctl import threadpool_info
    return [pool["num_threads"] for pool in threadpool_info() if pool["user_api"] == "blas"]


def test_workers_run_their_linear_algebra_on_one_thread():
    # common practice, no source: one BLAS thread per pool worker (the pool fills the cores)
    from chiropt.search.executor import ProcessExecutor
    with ProcessExecutor(1) as ex:
        threads = ex.map(_blas_threads, [0])[0]
    assert threads and all(n == 1 for n in threads)


def _large_arrays_stay_in_the_heap(_):
    # a freed 8 MiB array comes back at the same address when the heap keeps it
    import numpy as onp
    a = onp.ones(1 << 20)
    first = a.ctypes.data
    del a
    b = onp.ones(1 << 20)
    return first == b.ctypes.data


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc mallopt")
def test_workers_reuse_freed_memory():
    # mallopt(3), Linux man-pages: with M_MMAP_THRESHOLD raised, a freed large block is
    # reused by the next allocation of the same size instead of a fresh mmap
    from chiropt.search.executor import ProcessExecutor
    with ProcessExecutor(1) as ex:
        assert ex.map(_large_arrays_stay_in_the_heap, [0])[0]


def _frozen_objects(_):
    import gc
    return gc.get_freeze_count()


def test_workers_keep_their_loaded_modules_out_of_the_garbage_collector():
    # Python documentation (gc.freeze): objects alive after the worker's set-up are moved
    # to the permanent generation, which full collections do not walk
    from chiropt.search.executor import ProcessExecutor
    with ProcessExecutor(1) as ex:
        assert ex.map(_frozen_objects, [0])[0] > 10_000
