"""Dask executor: throughput, per-task overhead, and the scaling to expect on N nodes.

Run by hand (needs ``chiropt[cluster]``):

    python benchmarks/dask_scaling.py            # a few minutes on 2 cores
    python benchmarks/dask_scaling.py --quick    # parts (2)-(4) only

Prints: (1) evaluations per second of a real goal (dipole model, 4 derivative-free
searches) on a local Dask cluster of 1 and 2 workers beside the local process pool;
(2) the scheduling overhead per task (round trip of an empty task, alone and pipelined);
(3) the serialization cost of a real search task (its goal and the rows it replays) and of
one streamed evaluation; (4) the run time expected on N nodes for evaluations of 10 ms
and 1 s from those figures (a model, stated below the table).
"""

from __future__ import annotations

import os
import pickle
import queue
import statistics
import sys
import tempfile
import textwrap
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

GOAL = """\
name: bench
design:
  lattice: {kind: square, period_nm: 420}
  particles:
    - {radius_nm: 75, material: Si}
  substrate: {material: SiO2}
  illumination: {wavelength_nm: 700}
  region: {kind: plane, height_nm: 10}
  model: {lmax: 1}
variables:
  particles[0].radius_nm: {min: 50, max: 110}
  lattice.period_nm: {min: 300, max: 520}
objectives:
  - {maximize: g, at_nm: 700}
search: {algorithm: COBYLA, starts: 4, max_evals_per_start: 150, xtol_rel: 0, ftol_rel: 0}
seed: 3
"""


def _noop(i):
    return i


def _stream_rows(topic, values, n, pause_s):
    """On a worker: ``n`` evaluation rows written through a streaming TaskStore, one every
    ``pause_s`` (a stand-in for the evaluation); the time spent writing [s]."""
    import functools

    from chiropt.search.cluster import emit
    from chiropt.store.stream import TaskStore

    ts = TaskStore(f"bench-{pause_s}", sink=functools.partial(emit, topic))
    spent = 0.0
    for seq in range(n):
        time.sleep(pause_s)
        t0 = time.perf_counter()
        ts.put_values((values[0], values[1], seq, *values[3:]))
        spent += time.perf_counter() - t0
    return spent, ts.ops


def throughput(goal, settings, workers, label):
    """(evaluations per second of the searches, executor start-up [s])."""
    from chiropt.run import make_executor, run_goal

    t0 = time.perf_counter()
    make_executor(settings, workers).close()  # start-up cost, measured apart
    startup = time.perf_counter() - t0
    with tempfile.TemporaryDirectory() as d:
        t0 = time.perf_counter()
        s = run_goal(goal, out=d, workers=workers, executor=settings, progress=False)
        wall = time.perf_counter() - t0
    rate = s.n_evaluations / max(1e-9, wall - startup)
    print(f"  {label:34s} {s.n_evaluations:5d} evaluations, {wall:6.1f} s run "
          f"({startup:4.1f} s start-up): {rate:7.1f} evaluations/s")
    return rate, startup


def main():
    from chiropt.goals import load_goal
    from chiropt.goals.schema import ExecutorSettings
    from chiropt.run import STORE_NAME, SearchTask, run_goal
    from chiropt.search.cluster import DaskExecutor
    from chiropt.store import EvaluationStore
    from chiropt.store.stream import StreamReceiver, TaskStore, snapshot

    os.environ.setdefault("OMP_NUM_THREADS", "1")
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "bench.yaml"
        p.write_text(textwrap.dedent(GOAL))
        (goal,) = load_goal(p)
    print(f"cores: {os.cpu_count()}")
    print("(1) throughput of a real goal (dipole model, 4 searches of <= 150 evaluations)")
    rates = {}
    quick = "--quick" in sys.argv  # parts (2)-(4) only
    for n in () if quick else (1, 2):
        rates[("local", n)] = throughput(goal, ExecutorSettings(), n, f"local pool, {n} workers")
        rates[("dask", n)] = throughput(goal, ExecutorSettings(kind="dask", workers=n), n,
                                        f"dask local cluster, {n} workers")
    serial = (45.0 if quick else  # --quick: the figure of a full run here
              throughput(goal, ExecutorSettings(), 0, "in this process (workers 0)")[0])
    t_eval = 1.0 / serial

    print("(2) scheduling overhead per task (empty task, 1 worker)")
    with DaskExecutor(workers=1) as ex:
        ex.submit(_noop, 0).result()  # warm
        lat = []
        for i in range(100):
            t0 = time.perf_counter()
            ex.submit(_noop, i).result()
            lat.append(time.perf_counter() - t0)
        n = 500
        t0 = time.perf_counter()
        fs = [ex.submit(_noop, i) for i in range(n)]
        [f.result() for f in fs]
        piped = (time.perf_counter() - t0) / n
        # streamed evaluations: real rows from a worker into a store of the run process
        with tempfile.TemporaryDirectory() as d:
            s = run_goal(goal, out=d, workers=0, progress=False)
            store = EvaluationStore(s.run_dir / STORE_NAME)
            ts = snapshot(store, "bench", [("start", 0)])
            key = next(iter(ts.rows))
            values = ts.rows[key]
            task = SearchTask(goal=goal, store_path=ts, index=0, x0=ts.get(*key).x, seed=1,
                              max_evals=150, deadline=None)
            empty = SearchTask(goal=goal, store_path=snapshot(store, "e", []), index=0,
                               x0=ts.get(*key).x, seed=1, max_evals=150, deadline=None)
            store.close()
            streamed = {}
            for pause in (0.0, 0.01):
                inbox = queue.SimpleQueue()
                topic = f"bench-{pause}"
                ex.subscribe(topic, inbox.put)
                rx = StreamReceiver(EvaluationStore(Path(d) / f"rx-{pause}.sqlite"))
                m = 2000 if pause == 0 else 300
                t0 = time.perf_counter()
                fut = ex.submit(_stream_rows, topic, values, m, pause)
                messages, applying = 0, 0.0
                while rx.puts < m and time.perf_counter() - t0 < 120:
                    try:
                        msg = inbox.get(timeout=0.05)
                        a0 = time.perf_counter()
                        rx.receive(msg)
                        applying += time.perf_counter() - a0
                        messages += 1
                    except queue.Empty:
                        if fut.done():
                            ops = fut.result()[1]
                            a0 = time.perf_counter()
                            rx.accept_all(ops)
                            applying += time.perf_counter() - a0
                wall = time.perf_counter() - t0
                spent = fut.result()[0]
                streamed[pause] = (m, messages, wall, spent, rx.puts, applying)
                rx.store.close()
    print(f"  round trip of one task alone: median {1e3 * statistics.median(lat):.2f} ms")
    print(f"  pipelined ({n} tasks in flight): {1e3 * piped:.2f} ms per task")
    print("(3) serialization")
    for label, t in (("search task, nothing to replay", empty),
                     (f"search task replaying {len(task.store_path.rows)} rows", task)):
        t0 = time.perf_counter()
        for _ in range(20):
            blob = pickle.dumps(t)
            pickle.loads(blob)
        dt = (time.perf_counter() - t0) / 20
        print(f"  {label:40s} {len(blob) / 1024:8.1f} KiB, pickle + unpickle {1e3 * dt:.2f} ms")
    probe = TaskStore("probe")
    probe.put_values(values)
    print(f"  one streamed evaluation: {len(probe.ops[0])} bytes of JSON (dipole model, one "
          "wavelength)")
    for pause, (m, messages, wall, spent, puts, applying) in streamed.items():
        what = ("as fast as they come" if pause == 0
                else f"one every {1e3 * pause:.0f} ms")
        print(f"  {m} evaluations {what}: {messages} messages; {1e6 * spent / m:.0f} us per "
              f"evaluation in the worker, {1e6 * applying / m:.0f} us to store it in the run "
              f"process; {wall:.2f} s from submission to the last stored ({puts} of {m})")
    m, _, wall, _, _, applying = streamed[0.0]
    stream_s = applying / m  # the run process's cost per evaluation (its serial part)

    print("(4) expected run time on N nodes (model below)")
    cores, searches, evals = 32, 256, 200
    task_s = statistics.median(lat)
    per_eval = stream_s
    print(f"  a goal of {searches} independent searches of {evals} evaluations, "
          f"{cores} worker processes per node; measured here: {1e3 * t_eval:.1f} ms per "
          f"dipole evaluation, {1e3 * task_s:.1f} ms per task, {1e3 * per_eval:.3f} ms "
          "per streamed evaluation")
    print(f"  {'nodes':>5s} {'10 ms evaluations':>22s} {'1 s evaluations':>22s}")
    for nodes in (1, 2, 4, 8, 16):
        row = []
        for te in (0.010, 1.0):
            slots = nodes * cores
            waves = -(-searches // slots)  # searches run in waves of `slots` at a time
            t = max(waves * (evals * te + task_s), searches * evals * per_eval)
            ideal = searches * evals * te / slots
            row.append(f"{t:9.1f} s ({ideal / t:4.0%})")
        print(f"  {nodes:5d} {row[0]:>22s} {row[1]:>22s}")
    print("  model: searches are sequential chains of evaluations, so at most one worker "
          "per search is busy;\n  run time = max(waves x (evaluations x t_eval + task "
          "overhead), all streamed evaluations x\n  their cost in the one run process, "
          "which writes them); (percent) = efficiency against the ideal\n  split of all "
          "evaluations over every worker. Beyond nodes x cores = searches more nodes add "
          "nothing:\n  raise search.starts or front.points.")
    for n in () if quick else (1, 2):
        r, _ = rates[("dask", n)]
        lr, _ = rates[("local", n)]
        print(f"  measured: {n} dask workers {r:.1f} evaluations/s = {r / lr:.0%} of the "
              f"local pool's {lr:.1f}")


if __name__ == "__main__":
    main()
