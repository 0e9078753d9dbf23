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


def _cmd_evaluate(args) -> int:
    from chiropt.design import load_design
    from chiropt.response import evaluate

    design = load_design(args.design)
    response = evaluate(design)
    for note in response.warnings:
        print(f"warning: {note}", file=sys.stderr)
    if args.json:
        payload = response.spectra()
        if args.grad:
            from chiropt.sensitivity import spectrum_sensitivities

            paths = [p.strip() for p in args.grad.split(",") if p.strip()]
            jac = spectrum_sensitivities(design, paths)
            payload["grad"] = {q: {p: v.tolist() for p, v in d.items()} for q, d in jac.items()}
        json.dump(payload, sys.stdout)
        sys.stdout.write("\n")
        return EXIT_OK
    if args.grad:
        raise InputError("--grad", "needs --json (derivatives are reported in the JSON object)")
    from chiropt.report.spectra import plot_far_field

    out_dir = Path(args.out) if args.out else Path(args.design).resolve().parent
    out_dir.mkdir(parents=True, exist_ok=True)
    stem = Path(args.design).stem
    png = plot_far_field(response, out_dir / f"{stem}-spectrum.png")
    _print_table(response)
    print(f"spectrum plot: {png}")
    return EXIT_OK


def _print_table(response) -> None:
    wl = response.wavelength_nm
    step = max(1, len(wl) // 12)
    print(f"{'lambda (nm)':>12} {'R(+1)':>8} {'T(+1)':>8} {'A(+1)':>8} "
          f"{'R(-1)':>8} {'T(-1)':>8} {'A(-1)':>8}")
    rows = list(range(0, len(wl), step))
    if rows[-1] != len(wl) - 1:
        rows.append(len(wl) - 1)
    for i in rows:
        print(f"{wl[i]:12.2f} " + " ".join(
            f"{getattr(response, q)[i, h]:8.4f}" for h in (0, 1) for q in ("R", "T", "A")))


def _cmd_materials(args) -> int:
    from chiropt.materials import list_short_names

    for row in list_short_names():
        name, ident, rng, ref = row[:4]
        print(f"{name:8s} {ident:32s} {rng[0]:7.0f}-{rng[1]:<7.0f} nm  {ref.splitlines()[0]}")
    return EXIT_OK


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="chiropt",
        description="Chiral near fields of periodic nanoparticle arrays: forward model, "
                    "metrics and Pareto search.")
    sub = parser.add_subparsers(dest="command", required=True)
    ev = sub.add_parser("evaluate", help="solve one design file and report its spectra")
    ev.add_argument("design", help="design file (YAML)")
    ev.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    ev.add_argument("--out", help="folder for plots (default: beside the design file)")
    ev.add_argument("--grad", metavar="PATH[,PATH...]",
                    help="with --json: exact derivatives of every spectrum with respect to these "
                         "design quantities, e.g. particles[0].radius_nm,lattice.period_nm")
    ev.set_defaults(func=_cmd_evaluate)
    ma = sub.add_parser("materials", help="list the short material names and their sources")
    ma.set_defaults(func=_cmd_materials)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    warnings.simplefilter("default")
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


if __name__ == "__main__":
    sys.exit(main())
