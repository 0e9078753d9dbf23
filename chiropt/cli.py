"""Command line: a thin layer over the library.

Owns: argument parsing, printing, exit codes (0 success, 1 computation failure,
2 invalid input). The library never prints; this module does.
"""

from __future__ import annotations

import argparse
import json
import sys
import warnings
from pathlib import Path

from chiropt.errors import ChiroptError, InputError

EXIT_OK, EXIT_FAILED, EXIT_INPUT = 0, 1, 2
GRID_RANGE = (2, 1024)  # --grid of evaluate --fields and inspect
TABLE_ROWS = 12         # wavelengths shown in the text table


def _check_grid(grid: int) -> None:
    lo, hi = GRID_RANGE
    if not lo <= grid <= hi:
        raise InputError("--grid", f"got {grid}, allowed an integer in [{lo}, {hi}]")


def _output_file(option: str, path: str) -> None:
    """Refuse an output file whose folder is missing or not writable (before any work)."""
    import os

    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    if target.is_dir():
        raise InputError(option, f"{path} is a folder; give a file name")
    if not folder.is_dir():
        raise InputError(option, f"cannot write {path}: folder {folder} does not exist")
    if not os.access(folder, os.W_OK):
        raise InputError(option, f"cannot write {path}: folder {folder} is not writable")


def _output_folder(option: str, path: Path) -> Path:
    """Create an output folder, or refuse it in one line."""
    import os

    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(option, f"cannot create folder {path}: {exc.strerror}") from None
    if not os.access(path, os.W_OK):
        raise InputError(option, f"cannot write into folder {path}")
    return path


def _cmd_evaluate(args) -> int:
    from chiropt.design import load_design
    from chiropt.response import evaluate

    design = load_design(args.design)
    if (args.at_nm is not None or args.fields) and design.region is None:
        raise InputError("region", "--at-nm and --fields need a region in the design, e.g. "
                                   "region: {kind: plane, height_nm: 10}")
    if args.fields:
        _check_grid(args.grid)
        _output_file("--fields", args.fields)
    if args.grad and not args.json:
        raise InputError("--grad", "needs --json (derivatives are reported in the JSON object)")
    out_dir = Path(args.out) if args.out else Path.cwd()
    if not args.json:
        _output_folder("--out", out_dir)
    response = evaluate(design, keep_solution=bool(args.fields), with_validity=args.validity)
    for note in response.warnings:
        print(f"warning: {note}", file=sys.stderr)
    if args.fields:
        _write_fields(design, response, args)
    if args.json:
        payload = response.spectra()
        if args.at_nm is not None:
            payload["orders"] = _orders_at(design, args.at_nm)
        if args.grad:
            from chiropt.sensitivity import spectrum_sensitivities

            paths = [p.strip() for p in args.grad.split(",") if p.strip()]
            jac = spectrum_sensitivities(design, paths)
            payload["grad"] = {q: {p: v.tolist() for p, v in d.items()} for q, d in jac.items()}
        json.dump(payload, sys.stdout)
        sys.stdout.write("\n")
        return EXIT_OK
    from chiropt.report.spectra import plot_far_field

    stem = Path(args.design).stem
    png = plot_far_field(response, out_dir / f"{stem}-spectrum.png")
    _print_table(response)
    if response.validity is not None:
        _print_validity(response.validity)
    if args.at_nm is not None:
        _print_orders(_orders_at(design, args.at_nm), args.at_nm)
    print(f"spectrum plot: {png}")
    return EXIT_OK


def _orders_at(design, at_nm: float) -> list:
    """Per-order table at the wavelength ``at_nm`` itself (docs/cli.md)."""
    from chiropt.metrics import order_table
    from chiropt.model import metrics_tolerance, run_model

    if not 1.0 <= at_nm <= 1e6:
        raise InputError("--at-nm", f"got {at_nm:g}, allowed a wavelength in [1, 1e6] nm")
    sol = run_model(design.with_wavelengths([at_nm])).solution
    return order_table(sol, design.region, 0, tol=metrics_tolerance(design))


def _write_fields(design, response, args) -> None:
    from chiropt.fields import representative_plane_nm, write_fields_npz
    from chiropt.model import maps_tolerance

    sol = response.solution
    z_nm = representative_plane_nm(sol.structure, design.region)
    # point values: the orders the solve kept for maps (evaluate(keep_solution=True))
    write_fields_npz(args.fields, sol, z_nm=z_nm, n=args.grid, tol=maps_tolerance(design))
    print(f"fields: {args.fields} (z = {z_nm:.2f} nm)", file=sys.stderr)


def _print_table(response) -> None:
    wl = response.wavelength_nm
    m = response.metrics
    step = max(1, len(wl) // TABLE_ROWS)
    head = (f"{'lambda (nm)':>12} {'R(+1)':>8} {'T(+1)':>8} {'A(+1)':>8} "
            f"{'R(-1)':>8} {'T(-1)':>8} {'A(-1)':>8}")
    cap = m is not None and "cd_capacity" in m
    if m is not None:
        head += f" {'u':>8} {'g':>8} {'DOCP(+1)':>9} {'DOCP(-1)':>9}"
    if cap:
        head += f" {'g_ev':>8} {'ev_share':>8} {'cd_cap':>8} {'cd_eff':>8}"
    print(head)
    rows = list(range(0, len(wl), step))
    if rows[-1] != len(wl) - 1:
        rows.append(len(wl) - 1)
    for i in rows:
        line = f"{wl[i]:12.2f} " + " ".join(
            f"{getattr(response, q)[i, h]:8.4f}" for h in (0, 1) for q in ("R", "T", "A"))
        if m is not None:
            line += (f" {m['u'][i]:8.4f} {m['g'][i]:8.4f} {m['docp']['+1'][i]:9.4f}"
                     f" {m['docp']['-1'][i]:9.4f}")
        if cap:
            line += "".join(f" {m[k][i]:8.4f}" for k in ("g_ev", "ev_share", "cd_capacity",
                                                          "cd_efficiency"))
        print(line)
    if len(rows) < len(wl):
        print(f"{len(rows)} of {len(wl)} wavelengths shown; --json for all")
    if m is not None:
        print("u, g, DOCP: averages over the design's region (see `chiropt inspect`)")
    if cap:
        _print_verdict(response)


def _print_verdict(response) -> None:
    """Which limit holds the CD back, at the wavelength of the largest |g| (theory §18)."""
    import numpy as onp

    from chiropt.response import capacity_spectra

    m = response.metrics
    i = int(onp.argmax(onp.abs(onp.asarray(m["g"]))))
    verdicts = capacity_spectra(m)["verdict"]
    print("g_ev: evanescent orders' part of g; ev_share: their share of the intensity; "
          "cd_cap: the largest g_ev that share allows; cd_eff = g_ev/cd_cap")
    print(f"at {response.wavelength_nm[i]:.2f} nm (largest |g|): {verdicts[i]}")


def _print_validity(check: dict) -> None:
    from chiropt.response import VALIDITY_TOLERANCE

    print(f"validity: change of each quantity from {check['label']} to "
          f"{check['label_check']} (largest over wavelengths)")
    for name, change in sorted(check["change"].items(), key=lambda kv: -kv[1]):
        flag = "  above the tolerance" if change > VALIDITY_TOLERANCE else ""
        print(f"  {name:16s} {change:10.3g}{flag}")
    print(f"  worst {check['worst']:.3g} (tolerance {VALIDITY_TOLERANCE:g})")


def _print_orders(rows: list, at_nm: float) -> None:
    print(f"diffraction orders at {at_nm:g} nm (share of the region-averaged intensity):")
    print(f"{'(m,n)':>9} {'kind':>11} {'share':>9} {'g':>9} {'DOCP(+1)':>9} {'DOCP(-1)':>9} "
          f"{'CD bound':>9}")
    shown = sorted(rows, key=lambda r: -r["share"])[:TABLE_ROWS]
    for r in shown:
        bound = f"{r['bound']:9.4f}" if r.get("bound") is not None else f"{'-':>9}"
        kind = "evanescent" if r["evanescent"] else "propagating"
        order = f"({r['m']},{r['n']})"
        print(f"{order:>9} {kind:>11} {r['share']:9.3g} {r['g']:9.4f} "
              f"{r['docp']['+1']:9.4f} {r['docp']['-1']:9.4f} {bound}")
    if len(shown) < len(rows):
        print(f"{len(shown)} of {len(rows)} orders shown (the strongest); --json for all")


def _cmd_inspect(args) -> int:
    from chiropt.design import load_design
    from chiropt.report.inspect import inspect_design

    design = load_design(args.design)
    if design.region is None:
        raise InputError("region", "inspect needs a region in the design, e.g. "
                                   "region: {kind: plane, height_nm: 10}")
    _check_grid(args.grid)
    out_dir = _output_folder("--out", Path(args.out) if args.out else Path.cwd())
    notes: list[str] = []
    findings: list[str] = []
    for path in inspect_design(design, args.at_nm, out_dir, grid=args.grid, notes=notes,
                               findings=findings):
        print(path)
    for line in findings:  # stdout stays the list of figures, for scripts
        print(line, file=sys.stderr)
    for note in notes:
        print(f"warning: {note}", file=sys.stderr)
    return EXIT_OK


def _cmd_export(args) -> int:
    from chiropt.design import load_design
    from chiropt.export.layout import write_fullwave_setup, write_gds

    design = load_design(args.design)
    if not (args.gds or args.setup):
        raise InputError("export", "give --gds FILE.gds and/or --setup FILE.json")
    for option, path in (("--gds", args.gds), ("--setup", args.setup)):
        if path:
            _output_file(option, path)
    if args.gds:
        print(f"layout: {write_gds(design, args.gds, cells=args.cells)}")
    if args.robustness and not args.setup:
        raise InputError("--robustness", "goes with --setup FILE.json (it is written into it)")
    if args.setup:
        section = None
        if args.robustness:
            from chiropt.export.robustness import read_robustness, setup_section

            try:
                section = setup_section(read_robustness(args.robustness))
            except (OSError, ValueError, KeyError) as exc:
                raise InputError("--robustness", f"cannot read {args.robustness} as a file of "
                                                 f"chiropt robustness: {exc}") from None
        print(f"full-wave set-up: {write_fullwave_setup(design, args.setup, robustness=section)}")
    return EXIT_OK


def _cmd_robustness(args) -> int:
    from chiropt.robust.spec import parse_sigma_text
    from chiropt.robustness import robustness

    outcome = robustness(args.target, top=args.top, sigma=parse_sigma_text(args.sigma),
                         na=args.na, band_nm=args.band_nm, samples=args.samples,
                         seed=args.seed, at_nm=args.at_nm, band_shape=args.band_shape,
                         out=args.out, require=args.require)
    for stem, result in outcome.results.items():
        print(f"{stem} at {result['at_nm']:g} nm:")
        print(f"  {'metric':8s} {'nominal':>10s} {'MC p5':>10s} {'MC p50':>10s} "
              f"{'MC p95':>10s} {'1st-order':>10s} {'cone':>10s} {'band':>10s} "
              f"{'width nm':>9s}")
        for m, r in result["metrics"].items():
            mc = r.get("monte_carlo", {})
            cells = [mc.get("p5"), mc.get("p50"), mc.get("p95")]
            text = " ".join(f"{v:10.4g}" if v is not None else f"{'-':>10s}" for v in cells)
            agree = r.get("agreement", {}).get("first_order", "-")
            extra = " ".join(f"{r[k]:10.4g}" if k in r else f"{'-':>10s}"
                             for k in ("cone", "band"))
            width = r.get("fwhm_nm", float("nan"))
            print(f"  {m:8s} {r['nominal']:10.4g} {text} {agree:>10s} {extra} {width:9.3g}")
        for c in result["constraints"]:
            print(f"  P({c['label']}) = {c['probability']:.3g}")
        if result.get("yield") is not None:
            print(f"  yield = {result['yield']:.3g}")
    if outcome.ranking:
        print("ranking by robust value (rank, candidate, robust, nominal rank):")
        for d in outcome.ranking:
            print(f"  {d['rank']:3d} {d['candidate']:10s} {d['robust']:10.4g} "
                  f"({d['robust_kind']}; nominal {d['nominal']:.4g}, rank {d['nominal_rank']})")
    for note in outcome.notes:
        print(f"note: {note}", file=sys.stderr)
    for files in outcome.files.values():
        for f in files:
            print(f)
    return EXIT_OK


def _cmd_materials(args) -> int:
    from chiropt.materials import list_short_names

    print(f"{'name':8s} {'database entry':32s} {'data range':18s} source")
    for row in list_short_names():
        name, ident, rng, ref = row[:4]
        print(f"{name:8s} {ident:32s} {rng[0]:7.0f}-{rng[1]:<7.0f} nm  {ref.splitlines()[0]}")
    return EXIT_OK


def _cmd_run(args) -> int:
    from chiropt.run import run_goal_file

    from chiropt.goals import load_goal

    executor = None
    if args.executor is not None:
        from chiropt.goals.schema import parse_executor_option

        executor = parse_executor_option(args.executor)
    for g in load_goal(args.goal):
        if g.name_note:
            print(g.name_note, file=sys.stderr)
    summaries = run_goal_file(args.goal, out=args.out, workers=args.workers,
                              progress=not args.quiet, executor=executor)
    for s in summaries:
        print(f"{s.run_dir}: {s.status}; {s.n_evaluations} evaluations ({s.n_failed} failed), "
              f"front of {_count(len(s.front), 'design')}, "
              f"{_count(len(s.candidates), 'candidate')}")
    if any(s.status == "interrupted" for s in summaries):
        print("chiropt: interrupted; run the same command to resume", file=sys.stderr)
        return 130
    return EXIT_OK if all(s.status == "complete" for s in summaries) else EXIT_FAILED


def _run_dirs(args) -> list[str]:
    if len(set(args.run_dirs)) != len(args.run_dirs):
        raise InputError("RUN_DIR", f"a run folder is given twice: {args.run_dirs}")
    return args.run_dirs


def _cmd_report(args) -> int:
    from chiropt.report.html import write_html_report

    dirs = _run_dirs(args)
    if args.out:
        _output_file("--out", args.out)
    if not 0 <= args.details <= 10000:
        raise InputError("--details", f"got {args.details}, allowed an integer in [0, 10000]")
    path = write_html_report(dirs, args.out, details=args.details,
                             progress=None if args.quiet else
                             (lambda t: print(t, file=sys.stderr, flush=True)))
    print(f"report: {path} ({path.stat().st_size / 1e6:.2f} MB)")
    return EXIT_OK


def _cmd_compare(args) -> int:
    from chiropt.report.static import write_comparison_folder

    dirs = _run_dirs(args)
    if len(dirs) < 2:
        raise InputError("RUN_DIR", "compare needs at least two run folders")
    out = _output_folder("--out", Path(args.out)) if args.out else None
    for path in write_comparison_folder(dirs, out):
        print(path)
    return EXIT_OK


def _count(n: int, word: str) -> str:
    return f"{n} {word}" if n == 1 else f"{n} {word}s"


def _cmd_goal(args) -> int:
    if args.explain:
        from chiropt.goals.schema import EXPLAIN

        print(EXPLAIN)
        return EXIT_OK
    if args.check:
        from chiropt.goals import check_goal, load_goal

        for g in load_goal(args.check):
            if g.name_note:
                print(g.name_note, file=sys.stderr)
            check_goal(g)
            print(f"{g.run_name}: valid ({len(g.variables)} variables, "
                  f"{len(g.objectives)} objective(s), {len(g.constraints)} constraint(s))")
        return EXIT_OK
    raise InputError("goal", "give --explain (the goal-file reference) or --check GOAL.yaml")


def build_parser() -> argparse.ArgumentParser:
    from chiropt import __version__

    parser = argparse.ArgumentParser(
        prog="chiropt",
        description="Chiral near fields of periodic nanoparticle arrays: forward model, "
                    "metrics and Pareto search.")
    parser.add_argument("--version", action="version", version=f"chiropt {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)
    ev = sub.add_parser("evaluate", help="solve one design file and report its spectra")
    ev.add_argument("design", help="design file (YAML)")
    ev.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    ev.add_argument("--out", help="folder for plots (default: the current folder)")
    ev.add_argument("--grad", metavar="PATH[,PATH...]",
                    help="with --json: exact derivatives of every spectrum with respect to these "
                         "design quantities, e.g. particles[0].radius_nm,lattice.period_nm")
    ev.add_argument("--validity", action="store_true",
                    help="also solve with one more multipole order and report the change of "
                         "every quantity (warns when it exceeds 0.01)")
    ev.add_argument("--at-nm", type=float, metavar="L",
                    help="with a region: the per-order table at wavelength L (nm); in the JSON "
                         "object with --json")
    ev.add_argument("--fields", metavar="FILE.npz",
                    help="write complex E and Z0 H on a grid over the cell at the region's plane "
                         "(a slab's mid-plane)")
    ev.add_argument("--grid", type=int, default=32, metavar="N",
                    help="grid points per lattice vector for --fields (default 32, allowed "
                         f"{GRID_RANGE[0]}-{GRID_RANGE[1]})")
    ev.set_defaults(func=_cmd_evaluate)
    ins = sub.add_parser("inspect", help="near-field maps, spectra and diffraction-order "
                                         "analysis of one design at one wavelength")
    ins.add_argument("design", help="design file (YAML) with a region")
    ins.add_argument("--at-nm", type=float, required=True, metavar="L",
                     help="wavelength (nm) of the maps and order analysis")
    ins.add_argument("--out", help="folder for the figures (default: the current folder)")
    ins.add_argument("--grid", type=int, default=64, metavar="N",
                     help="grid points per lattice vector of the maps (default 64, allowed "
                          f"{GRID_RANGE[0]}-{GRID_RANGE[1]})")
    ins.set_defaults(func=_cmd_inspect)
    ex = sub.add_parser("export", help="write a design (e.g. a run's candidate) as a GDSII "
                                       "layout and/or a full-wave set-up file")
    ex.add_argument("design", help="design file (YAML), e.g. runs/NAME/candidates/c000.yaml")
    ex.add_argument("--gds", metavar="FILE.gds", help="GDSII layout of the array")
    ex.add_argument("--cells", type=int, default=10, metavar="N",
                    help="unit cells along each lattice vector in the layout (default 10)")
    ex.add_argument("--setup", metavar="FILE.json",
                    help="geometry, n and k at the design wavelengths, stack and incident "
                         "Jones vectors for a full-wave solver")
    ex.add_argument("--robustness", metavar="FILE.json",
                    help="with --setup: write this result of `chiropt robustness` (error "
                         "model, its samples, robust figures), or a run's "
                         "robust_samples.json, into the set-up")
    ex.set_defaults(func=_cmd_export)
    ro = sub.add_parser("robustness", help="fabrication errors, illumination cone and band "
                                           "around a design or a run's candidates")
    ro.add_argument("target", help="design file (YAML) or run folder (runs/NAME-MATERIAL)")
    ro.add_argument("--top", type=int, default=5, metavar="N",
                    help="run folder: analyse N candidates spread along the front (default 5)")
    ro.add_argument("--sigma", metavar="Q=S[,Q=S...]",
                    help="Gaussian fabrication errors, e.g. radius_nm=3,lattice.period_nm=2 "
                         "(a bare name such as radius_nm moves every quantity ending in it "
                         "together; A+B=S one shared error)")
    ro.add_argument("--na", type=float, metavar="X",
                    help="numerical aperture of the illumination cone in the host")
    ro.add_argument("--band-nm", type=float, metavar="B",
                    help="spectral band: FWHM of a Gaussian weight (or width, --band-shape "
                         "flat) [nm]")
    ro.add_argument("--band-shape", choices=("gaussian", "flat"), default=None,
                    help="spectral weight of the band (default gaussian)")
    ro.add_argument("--samples", type=int, metavar="N",
                    help="Monte Carlo error samples (default 64, allowed 1-4096)")
    ro.add_argument("--seed", type=int, metavar="S",
                    help="seed of the error samples (default: the run's seed, or 1)")
    ro.add_argument("--at-nm", type=float, metavar="L",
                    help="design file: the design wavelength (default its first wavelength)")
    ro.add_argument("--require", metavar="M>=V[,M<=V...]",
                    help="design file: constraints whose probability (and joint yield) over "
                         "the error samples is reported, e.g. u>=0.3,g>=1.1")
    ro.add_argument("--out", help="folder of the tables and figures")
    ro.set_defaults(func=_cmd_robustness)
    ma = sub.add_parser("materials", help="list the short material names and their sources")
    ma.set_defaults(func=_cmd_materials)
    ru = sub.add_parser("run", help="optimize a goal file into a run folder (resumes)")
    ru.add_argument("goal", help="goal file (YAML); see `chiropt goal --explain`")
    ru.add_argument("--out", help="folder of run folders (default: runs/ in the current folder)")
    ru.add_argument("--workers", type=int, default=None,
                    help="worker processes (default: all cores; 0: in this process); with "
                         "--executor dask, the workers of the local Dask cluster")
    ru.add_argument("--executor", metavar="local|dask|ADDRESS",
                    help="where the searches run (overrides the goal's executor): local "
                         "(process pool), dask (a local Dask cluster) or the address of a "
                         "Dask scheduler, e.g. tcp://HOST:8786")
    ru.add_argument("--quiet", action="store_true", help="no progress display")
    ru.set_defaults(func=_cmd_run)
    rp = sub.add_parser("report", help="one self-contained HTML page of one or more run "
                                       "folders (fronts compared when several)")
    rp.add_argument("run_dirs", nargs="+", metavar="RUN_DIR", help="run folder(s) of "
                    "`chiropt run`, e.g. runs/quickstart-Si")
    rp.add_argument("--out", metavar="FILE.html", help="default: RUN_DIR/report.html (one "
                    "run) or report.html beside the first run folder (several)")
    rp.add_argument("--details", type=int, default=200, metavar="N",
                    help="front designs with spectra and maps, spread along the front "
                         "(default 200)")
    rp.add_argument("--quiet", action="store_true", help="no progress lines")
    rp.set_defaults(func=_cmd_report)
    co = sub.add_parser("compare", help="fronts of several run folders at one reference "
                                        "point: PNG, CSV and Markdown tables")
    co.add_argument("run_dirs", nargs="+", metavar="RUN_DIR", help="run folders of "
                    "`chiropt run` with the same objectives")
    co.add_argument("--out", metavar="DIR", help="output folder (default: compare/ beside "
                    "the first run folder)")
    co.set_defaults(func=_cmd_compare)
    go = sub.add_parser("goal", help="the goal-file reference, or check a goal file")
    go.add_argument("--explain", action="store_true", help="print the goal-file reference")
    go.add_argument("--check", metavar="GOAL.yaml", help="validate a goal file, run nothing")
    go.set_defaults(func=_cmd_goal)
    return parser


# commands whose process evaluates many designs itself (a serial run, robustness samples)
_EVALUATING = {"_cmd_run", "_cmd_robustness"}


def _take_sigint() -> None:
    """SIGINT stops a run cleanly (resume later) whatever this process inherited: a parent
    may start it with SIGINT ignored (a non-interactive shell's background job) or blocked,
    and Python then installs no handler; ``kill -INT`` must still reach the run."""
    import signal

    if hasattr(signal, "pthread_sigmask"):
        signal.pthread_sigmask(signal.SIG_UNBLOCK, {signal.SIGINT})
    signal.signal(signal.SIGINT, signal.default_int_handler)


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    warnings.simplefilter("default")
    if args.func.__name__ in _EVALUATING:   # serial runs and evaluations happen here
        from chiropt.search.executor import freeze_loaded_objects, reuse_freed_memory

        reuse_freed_memory()
        freeze_loaded_objects()
        _take_sigint()
    try:
        return args.func(args)
    except InputError as exc:
        print(f"chiropt: invalid input: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except ChiroptError as exc:
        print(f"chiropt: failed: {exc}", file=sys.stderr)
        return EXIT_FAILED
    except KeyboardInterrupt:
        print("chiropt: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # output piped into a command that stopped reading (head)
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK


if __name__ == "__main__":
    sys.exit(main())
