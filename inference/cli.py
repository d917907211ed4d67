"""The ``arrhenia`` command: parses arguments, calls the API, maps errors to exit codes. Nothing else."""

from __future__ import annotations

import argparse
import gc
import os
import select
import shlex
import signal
import sys
import threading
import traceback
from pathlib import Path
from typing import NoReturn

from ._version import __version__
from .errors import ExitCode, StudyError
from .processes import cache_folder, own_pytensor_cache


class _Terminated(BaseException):
    """Raised in the main thread on SIGTERM so staged results are cleaned up like on Ctrl-C."""


_MAIN_PID = os.getpid()


def _on_sigterm(signum: int, frame: object) -> None:
    if os.getpid() != _MAIN_PID:  # a sampling worker forked from us: leave quietly, the parent cleans up
        os._exit(ExitCode.TERMINATED)
    raise _Terminated


#: The sampler settings every fitting command takes, with their help; their defaults are the schema's.
SAMPLING_OPTIONS = (
    ("draws", "draws per chain after tuning"),
    ("tune", "tuning steps per chain"),
    ("chains", "number of chains"),
    ("seed", "the one integer seed of each fit"),
)


class _Parser(argparse.ArgumentParser):
    """argparse with its usage errors on one line and exit 2, like every other mistake in the input."""

    def error(self, message: str) -> NoReturn:
        self.exit(ExitCode.BAD_INPUT, f"{self.prog}: error: {' '.join(message.split())} (see '{self.prog} --help')\n")


def _schema_default(text: str, model: type, key: str, file: str = "study") -> str:
    """``text`` with the default the schema gives ``key`` (a dotted key path of ``model``, a file's root model),
    so that help texts cannot drift from the schema."""
    first, *rest = key.split(".")
    value = model.model_fields[first].default
    for part in rest:
        value = getattr(value, part)
    return f"{text} (default: the {file} file's {key}, else {value})"


def _parser() -> argparse.ArgumentParser:
    from .inputs.schema import ScenarioFile, StudyFile

    parser = _Parser(prog="arrhenia", description="Bayesian inference of chemical kinetics.")
    parser.add_argument("--version", action="version", version=f"arrhenia {__version__}")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    def fit_options(command: argparse.ArgumentParser) -> None:
        for name, text in SAMPLING_OPTIONS:
            command.add_argument(f"--{name}", type=int, help=_schema_default(text, StudyFile, f"sampling.{name}"))
        command.add_argument("--cores", type=int, help="chains run in parallel on this many cores (1: in sequence)")
        command.add_argument("--overwrite", action="store_true", help="replace an existing results folder")
        command.add_argument("--quiet", action="store_true", help="print nothing but errors")

    demo = commands.add_parser("demo", help="write the bundled demo study and data, then fit it")
    demo.add_argument(
        "--out", type=Path, default=Path("arrhenia-demo"), help="folder for the demo (default: %(default)s)"
    )
    fit_options(demo)

    commands.add_parser("schema", help="print the JSON Schema of the study file (for YAML editors)")

    from .workflows.starter import STARTERS

    new = commands.add_parser("new", help="start a study: a commented study file and empty data templates")
    new.add_argument("folder", type=Path, help="where to write them (made if absent; no file is ever replaced)")
    new.add_argument(
        "--kind",
        required=True,
        choices=tuple(STARTERS),
        help="; ".join(f"{kind}: {starter.description}" for kind, starter in STARTERS.items()),
    )

    check = commands.add_parser("check", help="validate a study file and its data; samples nothing")
    check.add_argument("study", type=Path)
    check.add_argument(
        "--against",
        type=Path,
        metavar="RESULTS_DIR",
        help="also say whether that results folder still matches this study and its data",
    )
    check.add_argument(
        "--prior-predictive", action="store_true", help="draw from the priors alone and plot the draws against the data"
    )
    check.add_argument("--out", type=Path, help="prior predictive folder (default: results/<study>-prior-predictive)")
    check.add_argument("--draws", type=int, default=300, help="prior draws (default: %(default)s)")
    check.add_argument("--overwrite", action="store_true", help="replace an existing prior predictive folder")

    compare = commands.add_parser("compare", help="compare candidate studies fitted to the same data")
    compare.add_argument("candidates", type=Path, nargs="+", help="study files or saved results folders")
    compare.add_argument("--out", type=Path, help="comparison folder (default: results/comparison)")
    compare.add_argument(
        "--root",
        type=Path,
        default=Path("results"),
        help="where candidate study files are fitted, one folder each (default: %(default)s)",
    )
    compare.add_argument("--workers", type=int, help="fit the candidates side by side on this many Dask workers")
    fit_options(compare)

    predict = commands.add_parser("predict", help="reactor predictions from a saved posterior (no refit)")
    predict.add_argument("results", type=Path, help="a results folder written by 'arrhenia fit'")
    predict.add_argument("scenarios", type=Path, help="a YAML file of reactor scenarios")
    predict.add_argument("--out", type=Path, help="predictions folder (default: RESULTS/predictions)")
    predict.add_argument(
        "--draws", type=int, help=_schema_default("posterior draws to push through", ScenarioFile, "draws", "scenarios")
    )
    predict.add_argument("--overwrite", action="store_true", help="replace an existing predictions folder")
    predict.add_argument("--quiet", action="store_true", help="print nothing but errors")

    upcoming = commands.add_parser(
        "next", help="rank candidate experiments by how much they would shrink a target's uncertainty (no refit)"
    )
    upcoming.add_argument("results", type=Path, help="a results folder written by 'arrhenia fit'")
    upcoming.add_argument("candidates", type=Path, help="a YAML file of candidate experiments")
    upcoming.add_argument(
        "--target", help="the quantity to pin down, e.g. 'Ea[coupling]' or 'k[coupling, 85 degC]' (default: the file's)"
    )
    upcoming.add_argument("--out", type=Path, help="folder of the ranking (default: RESULTS/next_experiment)")
    upcoming.add_argument("--overwrite", action="store_true", help="replace an existing ranking folder")
    upcoming.add_argument("--quiet", action="store_true", help="print nothing but errors")

    fit = commands.add_parser("fit", help="fit a study and write its results folder")
    fit.add_argument("study", type=Path)
    fit.add_argument("--out", type=Path, help="results folder (default: results/<study>)")
    fit_options(fit)

    batch = commands.add_parser("batch", help="fit many studies at once on a local Dask cluster or a scheduler")
    batch.add_argument("studies", type=Path, nargs="+", help="study files")
    batch.add_argument(
        "--root",
        type=Path,
        default=Path("results"),
        help="one results folder per study below this (default: %(default)s)",
    )
    where = batch.add_mutually_exclusive_group()
    where.add_argument("--workers", type=int, help="worker processes of the local cluster (default: one per core)")
    where.add_argument("--scheduler", metavar="ADDRESS", help="a running Dask scheduler, e.g. tcp://head:8786")
    for name, text in SAMPLING_OPTIONS:
        batch.add_argument(f"--{name}", type=int, help=_schema_default(text, StudyFile, f"sampling.{name}"))
    batch.add_argument("--overwrite", action="store_true", help="refit studies whose results folder does not match")
    batch.add_argument("--quiet", action="store_true", help="print nothing but errors")
    return parser


def _check_numbers(args: argparse.Namespace) -> None:
    """Every number on the command line checked as input, before anything is read or written; the limits are
    the schema's (``Sampling`` for sampler settings and prior draws, ``ScenarioFile`` for predictive draws)."""
    from .inputs.options import check_count, sampling_overrides, schema_limits
    from .inputs.schema import Sampling, ScenarioFile

    if args.command == "predict":
        if args.draws is not None:
            check_count("--draws", args.draws, "number of posterior draws", *schema_limits(ScenarioFile, "draws"))
    elif args.command == "check":
        check_count("--draws", args.draws, "number of prior draws", *schema_limits(Sampling, "draws"))
    else:
        names = ("draws", "tune", "chains", "seed", "cores")
        sampling_overrides({name: getattr(args, name, None) for name in names}, prefix="--")
    if getattr(args, "workers", None) is not None:
        check_count("--workers", args.workers, "number of workers", 1, None)


def _run_options(args: argparse.Namespace) -> dict:
    """The fit options every fitting command shares, as keyword arguments of the API."""
    return {
        "draws": args.draws,
        "tune": args.tune,
        "chains": args.chains,
        "seed": args.seed,
        "cores": args.cores,
        "overwrite": args.overwrite,
        "quiet": args.quiet,
        "command_line": args.command_line,
    }


def _fit_and_report(study_path: Path, args: argparse.Namespace, out: Path | None) -> int:
    from .inputs.config import load_study
    from .outputs import reporting

    study = load_study(study_path)
    # Said before PyMC is imported (seconds), so a first fit shows at once what the next minute goes on; the
    # kernels compile in a forked process meanwhile, which is safe here, before PyMC starts any thread.
    if notice := reporting.compile_notice(study):
        from .physics.solution import compile_in_background

        compile_in_background(implicit=study.has_data("steady_states"))
        if not args.quiet:
            print(notice, flush=True)
    from .workflows.fit import fit_study

    result = fit_study(study, out=out, **_run_options(args))
    if not args.quiet:
        print(reporting.fit_report(result))
        if result.predictions is not None:
            print(reporting.prediction_report(result.predictions))
    return ExitCode.DONE if result.diagnostics.verdict == "pass" else ExitCode.UNTRUSTED


def _compare_and_report(candidates: list[Path], args: argparse.Namespace, out: Path | None, root: Path) -> int:
    from .outputs import reporting
    from .workflows.compare import compare_studies

    workers = getattr(args, "workers", None)
    result = compare_studies(candidates, out=out, root=root, workers=workers, **_run_options(args))
    if not args.quiet:
        print(reporting.comparison_report(result))
    return ExitCode.DONE if result.trusted else ExitCode.UNTRUSTED


def _run(args: argparse.Namespace) -> int:
    from .inputs.config import load_study

    _check_numbers(args)
    if args.command == "schema":
        import json

        from .inputs.schema import StudyFile

        print(json.dumps(StudyFile.model_json_schema(), indent=2))
        return ExitCode.DONE
    if args.command == "new":
        from .workflows.starter import write_starter

        written = write_starter(args.folder, args.kind)
        print(f"wrote {', '.join(path.name for path in written)} into {args.folder}")
        print(f"fill in the data and the priors, then: arrhenia check {written[0]}")
        return ExitCode.DONE
    if args.command == "check":
        from .outputs import reporting

        if args.against is not None and not args.against.exists():
            raise StudyError(
                f"--against {args.against}", "does not exist", "give a results folder written by 'arrhenia fit'"
            )
        study = load_study(args.study)
        from .workflows.kinds import open_problem

        print(reporting.check_report(study, open_problem(study), sampling_next=args.prior_predictive))
        if args.prior_predictive:
            from .workflows.prior_check import prior_predictive_check

            check = prior_predictive_check(study, out=args.out, draws=args.draws, overwrite=args.overwrite)
            print(
                f"prior predictive: {check.inside_90:.0%} of the measurements lie inside the 90 % interval of the "
                f"priors' predictions ({check.draws} draws); figures and table in {check.results_dir}"
            )
            if check.inside_90 < 0.5:
                print("warning: the priors hardly allow the data; widen or move them before fitting")
        if args.against is None:
            return ExitCode.DONE
        from .workflows.fit import provenance_differences

        differences = provenance_differences(args.against, study)
        if not differences:
            print(f"{args.against} matches this study and its data")
            return ExitCode.DONE
        print(f"{args.against} does NOT match this study and its data:")
        print("\n".join(f"  - {line}" for line in differences))
        return ExitCode.UNTRUSTED
    if args.command == "fit":
        return _fit_and_report(args.study, args, args.out)
    if args.command == "predict":
        from .outputs import reporting
        from .workflows.predict import predict

        result = predict(
            args.results,
            args.scenarios,
            out=args.out,
            overwrite=args.overwrite,
            quiet=args.quiet,
            draws=args.draws,
            command_line=args.command_line,
        )
        if not args.quiet:
            print(reporting.prediction_report(result))
        return ExitCode.DONE
    if args.command == "next":
        from .workflows.next_experiment import next_experiment_report, rank_experiments

        ranked = rank_experiments(
            args.results,
            args.candidates,
            target=args.target,
            out=args.out,
            overwrite=args.overwrite,
            quiet=args.quiet,
            command_line=args.command_line,
        )
        if not args.quiet:
            print(next_experiment_report(ranked))
        return ExitCode.DONE
    if args.command == "compare":
        return _compare_and_report(args.candidates, args, args.out, args.root)
    if args.command == "batch":
        from .workflows.batch import run_batch

        result = run_batch(
            args.studies,
            root=args.root,
            workers=args.workers,
            scheduler=args.scheduler,
            overwrite=args.overwrite,
            quiet=args.quiet,
            draws=args.draws,
            tune=args.tune,
            chains=args.chains,
            seed=args.seed,
            command_line=args.command_line,
        )
        if not args.quiet:
            counts = result.table["status"].value_counts()
            print(
                ", ".join(f"{count} {status}" for status, count in counts.items()) + f"; table in {result.summary_path}"
            )
        return result.exit_code
    if args.command == "demo":
        from .outputs import reporting
        from .outputs.results import check_target, check_writable_parent
        from .workflows.demo import ALTERNATIVE_STUDY_FILE, FITTED_STUDY_FILES, SCENARIOS_FILE, write_demo

        out: Path = args.out
        if out.exists() and not out.is_dir():
            raise StudyError(str(out), "is a file, not a folder", "choose another --out")
        results = out / "results"
        if args.overwrite:  # each of the demo's results folders is checked by its own writer
            check_writable_parent(results)
        else:
            check_target(results, overwrite=False)
        study_path = write_demo(out)
        if not args.quiet:
            print(f"wrote the demo studies into {out}; fitting {study_path.name}")
        fitted = _fit_and_report(study_path, args, results / load_study(study_path).name)
        if not args.quiet:
            print(f"\ncomparing with the competing candidate {ALTERNATIVE_STUDY_FILE}")
        compared = _compare_and_report(
            [study_path, out / ALTERNATIVE_STUDY_FILE], args, results / "comparison", results
        )
        if not args.quiet:
            print(f"\nreactor predictions from the fitted posterior ({SCENARIOS_FILE})")
        from .workflows.predict import predict

        predicted = predict(
            results / load_study(study_path).name, out / SCENARIOS_FILE, overwrite=True, quiet=args.quiet
        )
        if not args.quiet:
            print(reporting.prediction_report(predicted))
        for name in FITTED_STUDY_FILES[1:]:
            if not args.quiet:
                print(f"\nfitting {name}")
            fitted = max(fitted, _fit_and_report(out / name, args, results / load_study(out / name).name))
        return max(fitted, compared)
    raise AssertionError(args.command)  # argparse allows only the commands above


def _what_was_written(stop: BaseException) -> str:
    """What an interrupted command leaves: a batch notes which studies it finished; other commands write
    nothing (their folders are staged and never half-written)."""
    return "; ".join(getattr(stop, "__notes__", ())) or "no results were written"


def _listen_for_interrupts() -> None:
    """Ctrl-C and SIGTERM end every command cleanly, whatever the parent process left behind: a parent that ignores
    SIGINT (as shells do for background jobs, and as some test runners and job launchers pass on) or blocks it
    would otherwise make Arrhenia deaf to Ctrl-C, so the handlers are set and the signals unblocked here."""
    if threading.current_thread() is not threading.main_thread():
        return  # called from a thread (an embedding program): signals are the main thread's business
    signal.signal(signal.SIGINT, signal.default_int_handler)
    signal.signal(signal.SIGTERM, _on_sigterm)
    signal.pthread_sigmask(signal.SIG_UNBLOCK, {signal.SIGINT, signal.SIGTERM})


#: Young (generation 1) collections between full ones in the ``arrhenia`` process (Python's default: 10).
FULL_COLLECTION_AFTER = 1000


def main(argv: list[str] | None = None) -> int:
    """Entry point of the console script; returns the exit code."""
    global _MAIN_PID
    parser = _parser()
    if not (sys.argv[1:] if argv is None else argv):  # no command: say what there is, once, as a usage error
        parser.print_help(sys.stderr)
        return ExitCode.BAD_INPUT
    args = parser.parse_args(argv)
    args.command_line = shlex.join(["arrhenia", *(sys.argv[1:] if argv is None else argv)])
    _MAIN_PID = os.getpid()
    _listen_for_interrupts()
    try:
        return int(_run(args))
    except StudyError as error:
        print(f"arrhenia: error: {error}", file=sys.stderr)
        return ExitCode.BAD_INPUT
    except BrokenPipeError:
        if not _reader_gone():  # another pipe (a chain process's) broke: that is a fault, not "| head"
            return _fault()
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return ExitCode.DONE
    except KeyboardInterrupt as stop:
        print(f"arrhenia: interrupted; {_what_was_written(stop)}", file=sys.stderr)
        return ExitCode.INTERRUPTED
    except _Terminated as stop:
        print(f"arrhenia: terminated; {_what_was_written(stop)}", file=sys.stderr)
        return ExitCode.TERMINATED
    except Exception:
        return _fault()


def _fault() -> int:
    """Print the exception being handled and say it is Arrhenia's fault."""
    traceback.print_exc()
    print(
        "arrhenia: internal error: this is a fault of Arrhenia, not of your input; please report it "
        "with the lines above",
        file=sys.stderr,
    )
    return ExitCode.FAULT


def _reader_gone() -> bool:
    """Whether standard output is a pipe whose reader went away (e.g. "| head"): its write end polls POLLERR."""
    try:
        poller = select.poll()
        poller.register(sys.stdout.fileno(), select.POLLOUT)
        return any(events & select.POLLERR for _, events in poller.poll(0))
    except (AttributeError, OSError, ValueError):  # no poll on this system, or stdout is not a real file
        return False


def command_pytensor_cache() -> Path:
    """The folder of the ``arrhenia`` command's PyTensor C modules (unless the user chose one)."""
    return cache_folder() / "pytensor"


def console(argv: list[str] | None = None) -> NoReturn:
    """The ``arrhenia`` command: ``main`` in a process of its own, which it ends.

    Imports and model compilation leave about 800 000 long-lived objects; with Python's default thresholds the
    collector walks all of them about ten times while they are made (about 1.8 s of a 15 s fit) and several times
    more at interpreter exit (about 2.6 s). Here full collections wait for 1000 young ones instead of 10 (young
    garbage is still collected), and everything alive at the end is frozen, which exit then skips. PyTensor's
    compiled C modules go to Arrhenia's own cache folder (``processes.own_pytensor_cache``) unless the user chose
    one. A library user's process keeps its own settings: only this entry point changes them.
    """
    own_pytensor_cache(command_pytensor_cache())
    young, middle, _ = gc.get_threshold()
    gc.set_threshold(young, middle, FULL_COLLECTION_AFTER)
    code = main(argv)
    gc.freeze()
    sys.exit(code)


if __name__ == "__main__":
    console()
