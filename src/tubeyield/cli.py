"""The command line: `tubeyield <job> STUDY ...`. Prints readable tables, or JSON with --json.

Exit codes (tubeyield.status): 0 done, 2 a mistake in the study or the command (one line on stderr, no traceback),
3 the study is infeasible (no operating point meets every limit), 4 a result that did not pass its own verification
(shown, flagged, never called optimal), 1 the computation failed.
"""

from __future__ import annotations

import argparse
import contextlib
import faulthandler
import json
import os
import signal
import sys

from tubeyield import __version__
from tubeyield.errors import SolverOptionRefused, SolverUnavailable, StudyError
from tubeyield.guard import TimeLimitReached, time_guard
from tubeyield.report.files import SAVED
from tubeyield.status import EXIT_FAILED, EXIT_OK, EXIT_USER, SOLVED, exit_code


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="tubeyield", description="Operating windows for tubular reactors.")
    p.add_argument("--version", action="version", version=f"tubeyield {__version__}")
    sub = p.add_subparsers(dest="job", required=True)

    c = sub.add_parser("check", help="validate a study and its reaction network")
    c.add_argument("study")
    c.add_argument("--json", action="store_true", help="print the check as JSON")

    o = sub.add_parser("optimize", help="find the best operating point, what limits it, and verify it")
    o.add_argument("study")
    o.add_argument("--json", action="store_true", help="print the Result as JSON")
    o.add_argument("--save", metavar="DIR", help=f"write {SAVED['optimize']}, {SAVED['optimize-profile']} and the inputs to DIR")
    o.add_argument("--starts", type=int, help="number of starting points (default: numerics.starts)")
    o.add_argument("--tee", action="store_true", help="show Ipopt's iteration log (the starts then run one by one)")
    o.add_argument("--workers", type=int, help="cores for the starts (default: all cores)")
    _kinetics_option(o)

    s = sub.add_parser("simulate", help="profiles and metrics at a given operating point")
    s.add_argument("study")
    s.add_argument("--set", dest="settings", action="append", default=[], metavar="NAME=VALUE",
                   help="a decision value with units, e.g. tau=120s, T=340K, ratio.O=1.5 (repeatable)")
    s.add_argument("--json", action="store_true")
    s.add_argument("--profile", metavar="CSV", help="write the axial profile to this CSV file")
    _kinetics_option(s)

    f = sub.add_parser("front", help="the Pareto front of the two metrics in [front]")
    f.add_argument("study")
    f.add_argument("--points", type=int, help="number of levels (default: front.points)")
    f.add_argument("--workers", type=int, help="cores for the two ends and their starts (default: all cores)")
    f.add_argument("--json", action="store_true")
    f.add_argument("--save", metavar="DIR", help=f"write {SAVED['front']} and {SAVED['front-table']} to DIR")
    _kinetics_option(f)

    w = sub.add_parser("window", help="maps of the goal and the limits over the two decisions in [window]")
    w.add_argument("study")
    w.add_argument("--at", metavar="RESULT_JSON", help=f"an {SAVED['optimize']} to fix the other decisions at (default: "
                                                        "optimize first)")
    w.add_argument("--workers", type=int, help="processes for cell-by-cell maps (default: all cores)")
    w.add_argument("--json", action="store_true")
    w.add_argument("--save", metavar="DIR", help=f"write {SAVED['window']} to DIR")
    _kinetics_option(w)

    sw = sub.add_parser("sweep", help="run every scenario of [sweep] into a SQLite store")
    sw.add_argument("study")
    sw.add_argument("--store", required=True, metavar="SQLITE", help="the result store (created if missing)")
    sw.add_argument("--workers", type=int, help="local worker processes (default: all cores)")
    sw.add_argument("--dask", metavar="ADDRESS", help="run on an existing Dask scheduler, e.g. tcp://10.0.0.5:8786")
    sw.add_argument("--resume", action="store_true", help="run only the scenarios the store does not hold yet (and "
                                                          "those lost with a worker)")
    sw.add_argument("--retry-failed", action="store_true", help="with --resume: run the numerically failed "
                                                                "scenarios again too")
    sw.add_argument("--worker-wait", type=float, metavar="SECONDS", help="how long to wait for a worker when the "
                                                                         "cluster has none (default 120)")
    sw.add_argument("--quiet", action="store_true", help="no progress bar")
    _kinetics_option(sw)

    sr = sub.add_parser("sweep-report", help="summarize a sweep store: distributions, influence, robustness")
    sr.add_argument("store")
    sr.add_argument("--study", help="the study file (default: the copy kept in the store)")
    sr.add_argument("--save", metavar="DIR", help=f"write {SAVED['sweep-report']} (and the inputs) to DIR for the report")
    sr.add_argument("--workers", type=int)
    sr.add_argument("--json", action="store_true")

    ft = sub.add_parser("fit", help="estimate the kinetics in [fit] from the lab runs in [[experiment]]")
    ft.add_argument("study")
    ft.add_argument("--json", action="store_true", help="print the fit as JSON")
    ft.add_argument("--save", metavar="DIR", help=f"write {SAVED['fit']}, {SAVED['fit-network']} (the fitted network, "
                                                  f"for include), {SAVED['fit-covariance']} and the inputs to DIR")
    ft.add_argument("--tee", action="store_true", help="show Ipopt's iteration log")

    rb = sub.add_parser("robust", help="one operating point that keeps the limits in many scenarios of the "
                                       "uncertain parameters, validated on fresh ones")
    rb.add_argument("study")
    rb.add_argument("--scenarios", type=int, metavar="N", help="training scenarios (default: robust.scenarios, 50)")
    rb.add_argument("--share", type=float, metavar="P", help="share of the training scenarios whose limits must hold "
                                                             "(default: robust.share, 1)")
    rb.add_argument("--validation", type=int, metavar="M", help="fresh scenarios for the validation (default: "
                                                                "robust.validation, 400)")
    rb.add_argument("--sweep-summary", metavar="JSON", help=f"a sweep summary ({SAVED['sweep-report']}) whose "
                                                            "backed-off point is validated beside the robust one "
                                                            "(default: the one in --save DIR, if any)")
    rb.add_argument("--workers", type=int, help="processes for the validation (default: all cores)")
    _kinetics_option(rb)
    rb.add_argument("--json", action="store_true")
    rb.add_argument("--save", metavar="DIR", help=f"write {SAVED['robust']} and the inputs to DIR")
    rb.add_argument("--tee", action="store_true", help="show Ipopt's iteration log")

    r = sub.add_parser("report", help="build the HTML report from saved results")
    r.add_argument("results", help="a directory written by --save")
    r.add_argument("--out", metavar="DIR", help="where to write the report (default: reports/<study>)")
    return p


def _kinetics_option(parser) -> None:
    parser.add_argument("--kinetics", metavar="FIT_JSON", help="use the kinetics fitted by 'tubeyield fit --save DIR' "
                                                               "(DIR/fit.json) instead of the study's own values")


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    if hasattr(signal, "SIGUSR1"):
        # `kill -USR1 <pid>` prints every thread's stack to stderr: what a long run is doing, without stopping it
        faulthandler.register(signal.SIGUSR1, all_threads=True)
    try:
        with contextlib.ExitStack() as guards:
            _GUARDS.append(guards)
            return JOBS[args.job](args)
    except TimeLimitReached as exc:
        print(f"error: {getattr(args, 'study', '')}: numerics.time_limit: {exc}", file=sys.stderr)
        return EXIT_FAILED
    except StudyError as exc:
        print(f"error: {exc.line()}", file=sys.stderr)
        return EXIT_USER
    except BrokenPipeError:
        # the reader went away (`tubeyield check ... | head`): not an error of the study; stop quietly
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK
    except OSError as exc:
        # a path the user gave cannot be written or read (--save, --out, --profile, --store): one line, no traceback;
        # files are written atomically, so nothing partial is left
        where = exc.filename or getattr(args, "study", "") or ""
        print(f"error: {where}: {exc.strerror or exc}", file=sys.stderr)
        return EXIT_USER
    except SolverOptionRefused as exc:
        # numerics.ipopt is passed through unchecked: Ipopt is the one that knows its options
        print(f"error: {getattr(args, 'study', '')}: numerics.ipopt: {exc}", file=sys.stderr)
        return EXIT_USER
    except SolverUnavailable as exc:
        print(f"error: {getattr(args, 'study', '')}: numerics.solver: {exc}", file=sys.stderr)
        return EXIT_FAILED
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    finally:
        _GUARDS.clear()


def run() -> None:
    """The console command (`tubeyield`, `python -m tubeyield`): main(), then a quick exit.

    Python's own shutdown frees every object one at a time before the process ends: after an optimization of the
    demo, 0.13-0.18 s on the bench machine for the Pyomo model, casadi's functions and the modules, memory the
    operating system takes back at once. When main() has returned and no other thread runs, the exit handlers are run
    as at a normal exit (atexit: logging's flush, temporary files, a Dask cluster's shutdown), the standard streams
    flushed, and the process ends with os._exit and main's code. Otherwise (another thread still running, an
    exception out of main) Python exits as usual. main() itself stays a plain function for callers in-process."""
    import atexit
    import threading
    code = main()
    if threading.active_count() > 1:
        raise SystemExit(code)
    atexit._run_exitfuncs()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):        # a closed or broken pipe: nothing more can be said on it
            pass
    os._exit(code if isinstance(code, int) else EXIT_OK)


_GUARDS: list = []     # the running command's exit stack: _load arms the wall-time guard on it


def _load(path: str, table: str | None = None, what: str = "", *, guard: bool = True, need=None, kinetics=None):
    """The study at `path`; with `table`, one that has that table (a StudyError naming it otherwise). Mistakes in
    optional sections the job does not use are not errors (`need`: the sections it does use; default `table`).
    `kinetics`: a fit file whose values replace the study's (--kinetics). Arms the command's wall-time guard
    (numerics.time_limit) unless `guard` is False."""
    from tubeyield.study import load_study
    study = load_study(path, need=need if need is not None else ((table,) if table else ()))
    if kinetics:
        from tubeyield.study.read_kinetics import load_kinetics
        study = load_kinetics(study, kinetics)
    if table is not None and getattr(study, table) is None:
        raise StudyError(table, f"a [{table}] table with {what}", file=path)
    if guard and _GUARDS:
        _GUARDS[-1].enter_context(time_guard(study.numerics.time_limit))
    return study


def _at_least(value, flag: str, minimum: int, what: str) -> None:
    if value is not None and value < minimum:
        raise StudyError(flag, f"{what} (at least {minimum}), got {value}")


def _print_json(obj) -> None:
    json.dump(obj, sys.stdout, indent=2, allow_nan=False, default=str)
    sys.stdout.write("\n")


# ------------------------------------------------------------------------------------------------------------ check


def _check(args) -> int:
    from tubeyield import api
    from tubeyield.chemistry.network import Network

    study = _load(args.study, need=("front", "window", "sweep", "fit", "robust"))
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
            print(f"  {r.id:<{width}}  {r.equation:<28} {r.law.name:<10} r ~ {orders}")
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


# --------------------------------------------------------------------------------------------- optimize, simulate


def _optimize(args) -> int:
    from tubeyield.jobs.optimize import optimize
    from tubeyield.report.files import save_result
    from tubeyield.report.text import optimum_summary

    study = _load(args.study, kinetics=args.kinetics)
    _at_least(args.starts, "--starts", 1, "a number of starting points")
    _at_least(args.workers, "--workers", 1, "a number of cores")
    from tubeyield.solve.forked import usable_cores
    result = optimize(study, starts=args.starts, tee=args.tee, relax=True, workers=args.workers or usable_cores())
    if args.save:
        save_result(args.save, "optimize", result, study)
    if args.json:
        _print_json(result.to_dict())
    else:
        print(optimum_summary(result))
    return exit_code(result.status)


def _simulate(args) -> int:
    from tubeyield.jobs.evaluate import evaluate, parse_settings
    from tubeyield.report.files import write_atomic
    from tubeyield.report.text import evaluation_summary

    study = _load(args.study, kinetics=args.kinetics)
    values, notes = parse_settings(study, args.settings)
    result = evaluate(study, values)
    if args.profile:
        write_atomic(args.profile, result.profile.to_csv(index=False))
    if args.json:
        d = result.to_dict()
        d["notes"] = notes
        _print_json(d)
    else:
        print(evaluation_summary(result, notes))
    return EXIT_OK


# ---------------------------------------------------------------------------------------------- front, window, report


def _front(args) -> int:
    from tubeyield.jobs.front import front
    from tubeyield.report.files import save_inputs, saved, write_atomic, write_json

    study = _load(args.study, "front", "x, y and points", kinetics=args.kinetics)
    _at_least(args.points, "--points", 3, "a number of levels")
    _at_least(args.workers, "--workers", 1, "a number of cores")
    from tubeyield.solve.forked import usable_cores
    result = front(study, points=args.points, workers=args.workers or usable_cores())
    if args.save:
        write_json(saved(args.save, "front"), result.to_dict())
        write_atomic(saved(args.save, "front-table"), result.table().to_csv(index=False))
        save_inputs(args.save, study)
    if args.json:
        _print_json(result.to_dict())
    else:
        from tubeyield.report.text import front_summary
        print(front_summary(result))
    return exit_code(result.status)


def _window(args) -> int:
    import json as _json
    from pathlib import Path

    from tubeyield.jobs.optimize import optimize
    from tubeyield.jobs.result import point_of
    from tubeyield.jobs.window import optimum_marker, window
    from tubeyield.report.files import save_inputs, saved, write_json

    study = _load(args.study, "window", "x, y and points", kinetics=args.kinetics)
    if args.at:
        try:
            optimum_d = _json.loads(Path(args.at).read_text(encoding="utf-8"))
            base = point_of(optimum_d["decisions_si"], optimum_d["decisions"])
            status = optimum_d["status"]
        except (OSError, ValueError, KeyError) as exc:
            raise StudyError(args.at, f"an {SAVED['optimize']} written by 'tubeyield optimize --save' ({exc})") from None
        if set(base) != {d.name for d in study.decisions}:
            raise StudyError(args.at, "an optimum of this study (its decisions differ)")
    _at_least(args.workers, "--workers", 1, "a number of processes")
    if not args.at:
        from tubeyield.solve.forked import usable_cores
        res = optimize(study, workers=args.workers or usable_cores())    # its starts on the same cores as the maps
        base, status = res.point(), res.status
    optimum = optimum_marker(study, base) if status in SOLVED else None
    result = window(study, base, workers=args.workers, optimum=optimum)
    if args.save:
        write_json(saved(args.save, "window"), result.to_dict())
        save_inputs(args.save, study)
    if args.json:
        _print_json(result.to_dict())
    else:
        from tubeyield.report.text import window_summary
        print(window_summary(result))
    return EXIT_OK


def _sweep(args) -> int:
    from tubeyield.jobs.sweep import sweep

    study = _load(args.study, "sweep", "'vary'", guard=False, kinetics=args.kinetics)
    _at_least(args.workers, "--workers", 1, "a number of processes")
    if args.worker_wait is not None and args.worker_wait <= 0:
        raise StudyError("--worker-wait", f"a positive number of seconds, got {args.worker_wait:g}")
    out = sweep(study, args.store, workers=args.workers, dask=args.dask, resume=args.resume,
                retry_failed=args.retry_failed, progress=not args.quiet,
                worker_wait=args.worker_wait if args.worker_wait is not None else 120.0)
    done = ", ".join(f"{v} {k}" for k, v in sorted(out.counts.items())) or "none"
    print(f"{study.name}: {out.total} scenarios; {out.already} already in the store; ran {out.ran} on {out.where} "
          f"in {out.seconds:.1f} s ({done})")
    if out.interrupted:
        print("interrupted: the store keeps every finished scenario; run again with --resume to finish",
              file=sys.stderr)
        return 130
    lost = out.counts.get("lost", 0)
    if out.stopped or lost:
        why = [f"stopped: {out.stopped}; {out.not_run} scenario(s) in flight and "
               f"{out.total - out.already - out.ran - out.not_run} not started were not run"] if out.stopped else []
        why += [f"{lost} scenario(s) lost with their workers"] if lost else []
        print(f"error: {args.store}: " + "; ".join(why) + ". Every finished scenario is kept: run again with --resume",
              file=sys.stderr)
        return EXIT_FAILED
    return EXIT_OK


def _sweep_report(args) -> int:
    from tubeyield.jobs.sweep_summary import summarize
    from tubeyield.report.files import saved, write_json

    study = _load(args.study, "sweep", "'vary'", guard=False) if args.study else None
    summary = summarize(args.store, study, workers=args.workers)
    if args.save:
        write_json(saved(args.save, "sweep-report"), summary)
        if study is not None:
            from tubeyield.report.files import save_inputs
            save_inputs(args.save, study)
    if args.json:
        _print_json({k: v for k, v in summary.items() if k != "table_csv"})
        return EXIT_OK
    from tubeyield.report.text import sweep_summary
    print(sweep_summary(summary))
    return EXIT_OK


def _fit(args) -> int:
    from tubeyield.jobs.fit import fit
    from tubeyield.report.files import save_inputs, saved, write_atomic, write_json
    from tubeyield.report.text import fit_summary

    study = _load(args.study, "fit", "estimate (and [[experiment]] runs)")
    result = fit(study, tee=args.tee)
    if args.save:
        from tubeyield.report.network_file import covariance_csv, network_toml
        write_json(saved(args.save, "fit"), result.to_dict())
        if result.values_si:
            write_atomic(saved(args.save, "fit-network"), network_toml(study, result))
            write_atomic(saved(args.save, "fit-covariance"), covariance_csv(result))
        save_inputs(args.save, study)
    if args.json:
        _print_json(result.to_dict())
    else:
        print(fit_summary(result))
    return exit_code(result.status)


def _robust(args) -> int:
    from pathlib import Path

    from tubeyield.jobs.robust import robust
    from tubeyield.report.files import save_inputs, saved, write_json
    from tubeyield.report.text import robust_summary

    study = _load(args.study, "sweep", "the uncertain parameters ('vary' distributions or fit_uncertainty)",
                  need=("sweep", "robust"), kinetics=args.kinetics)
    _at_least(args.workers, "--workers", 1, "a number of processes")
    _at_least(args.scenarios, "--scenarios", 1, "a number of scenarios")
    _at_least(args.validation, "--validation", 1, "a number of validation scenarios")
    summary_file = Path(args.sweep_summary) if args.sweep_summary else \
        (saved(args.save, "sweep-report") if args.save and saved(args.save, "sweep-report").is_file() else None)
    backed = _backed_off(summary_file) if summary_file else None
    result = robust(study, scenarios=args.scenarios, share=args.share, validation=args.validation,
                    backed_off=backed, tee=args.tee, workers=args.workers)
    if args.save:
        write_json(saved(args.save, "robust"), result.to_dict())
        save_inputs(args.save, study)
    if args.json:
        _print_json(result.to_dict())
    else:
        print(robust_summary(result))
    return exit_code(result.status)


def _backed_off(path) -> dict | None:
    """The backed-off point of a saved sweep summary, or None (a summary without one)."""
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise StudyError("--sweep-summary", f"an existing sweep summary; {path} does not exist") from None
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise StudyError("--sweep-summary", f"a sweep summary written by 'tubeyield sweep-report --save' ({exc})") \
            from None
    rows = ((doc.get("robust") or {}).get("rows") or []) if isinstance(doc, dict) else []
    for row in rows:
        if isinstance(row, dict) and str(row.get("label", "")).startswith("backed-off") and \
                isinstance(row.get("point"), dict):
            return {"label": row["label"], "point": row["point"]}
    return None


def _report(args) -> int:
    from tubeyield.report.html import build_report
    index = build_report(args.results, args.out)
    print(f"report written: {index}")
    return EXIT_OK


JOBS = {"check": _check, "optimize": _optimize, "simulate": _simulate, "front": _front, "window": _window,
        "report": _report, "sweep": _sweep, "sweep-report": _sweep_report, "fit": _fit, "robust": _robust}
