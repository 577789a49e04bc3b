"""The command line: `tubeyield <job> STUDY ...`. Prints readable tables, or JSON with --json.

Exit codes: 0 done, 2 a mistake in the study or the command (one line on stderr, no traceback), 3 the study is
infeasible (no operating point meets every limit), 1 the computation failed.
"""

from __future__ import annotations

import argparse
import json
import sys

from tubeyield import __version__
from tubeyield.errors import StudyError

EXIT_OK, EXIT_FAILED, EXIT_USER, EXIT_INFEASIBLE = 0, 1, 2, 3


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="tubeyield", description="Operating windows for tubular reactors.")
    p.add_argument("--version", action="version", version=f"tubeyield {__version__}")
    sub = p.add_subparsers(dest="job", required=True)

    c = sub.add_parser("check", help="validate a study and its reaction network")
    c.add_argument("study")
    c.add_argument("--json", action="store_true", help="print the check as JSON")
    return p


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    try:
        return JOBS[args.job](args)
    except StudyError as exc:
        print(f"error: {exc.line()}", file=sys.stderr)
        return EXIT_USER
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130


def _print_json(obj) -> None:
    json.dump(obj, sys.stdout, indent=2, allow_nan=False, default=str)
    sys.stdout.write("\n")


# ------------------------------------------------------------------------------------------------------------ check


def _check(args) -> int:
    from tubeyield import api
    from tubeyield.chemistry.network import Network

    study = api.load_study(args.study)
    report = api.check(study)
    net = Network.of(study)
    if args.json:
        _print_json({
            "study": study.name, "valid": report.valid,
            "species": list(net.species), "reactions": {r.id: r.equation for r in study.reactions},
            "stoichiometric_matrix": net.matrix.tolist(), "rank": net.rank,
            "independent_reactions": list(net.independent_reactions()),
            "consistent": report.consistent, "masses": report.masses, "faulty_reactions": list(report.faulty_reactions),
            "errors": report.errors(), "warnings": report.warnings,
        })
    else:
        print(f"study {study.name}  ({study.path})")
        print(f"species ({len(net.species)}): " + ", ".join(
            f"{s.symbol}" + (f" [{s.label}]" if s.label else "") for s in study.species))
        print(f"reactions ({len(study.reactions)}):")
        width = max(len(r.id) for r in study.reactions)
        for r in study.reactions:
            orders = " ".join(f"{s}^{n:g}" for s, n in r.orders if n)
            print(f"  {r.id:<{width}}  {r.equation:<28} {r.law:<10} r ~ {orders}")
        print("stoichiometric matrix (species x reactions):")
        print("  " + " " * 6 + "".join(f"{rid:>9.8}" for rid in net.reaction_ids))
        for s, row in zip(net.species, net.matrix):
            print(f"  {s:<6}" + "".join(f"{v:>9g}" for v in row))
        print(f"rank {net.rank}; independent reactions: {', '.join(net.independent_reactions())}")
        print(f"mass consistency (HiGHS LP): {'consistent' if report.consistent else 'INCONSISTENT'}")
        print(f"element balances: {'balanced' if not report.element_errors else 'NOT balanced'}"
              + ("" if any(s.formula for s in study.species) else " (no formulas given)"))
        for w in report.warnings:
            print(f"warning: {w}")
        print("valid" if report.valid else "not valid")
    if not report.valid:
        for e in report.errors():
            print(f"error: {study.path}: reaction: {e}", file=sys.stderr)
        return EXIT_USER
    return EXIT_OK


JOBS = {"check": _check}
