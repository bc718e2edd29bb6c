"""The ``cohort`` command: a thin layer over the Python API.

Exit status: 0 when the study is usable, 2 on invalid input (problems on stderr, no
traceback), 1 on an unexpected internal failure.
"""

from __future__ import annotations

import argparse
import signal
import sys
import warnings
from collections.abc import Sequence
from pathlib import Path

from cohort.demo import DEMO_SEED, DEMO_SUBJECTS
from cohort.domain.cautions import CAUTION
from cohort.domain.options import DEFAULT_N_BOOT, FIELD_REFERENCING
from cohort.domain.problems import StudyError, format_problems
from cohort.domain.segments import MODELS
from cohort.domain.units import FF_UNITS, FIELD_UNITS
from cohort.io.settings import StudySettings, build_settings, read_study_file
from cohort.io.study import check_study
from cohort.report.destination import OutputFolderError


def _add_study_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("study", nargs="?", help="study file (study.toml)")
    flags = parser.add_argument_group("without a study file")
    flags.add_argument("--values", help="values table (CSV, TSV, XLSX or Parquet)")
    flags.add_argument("--subjects", help="subjects table (CSV, TSV, XLSX or Parquet)")
    flags.add_argument("--reference", help="name of the reference method")
    flags.add_argument("--groups", help="comma-separated group names, in display order")
    flags.add_argument("--methods", help="comma-separated test-method names, in display order")
    flags.add_argument("--segment-model", default=None, choices=tuple(MODELS))
    flags.add_argument("--ff-unit", default=None, choices=FF_UNITS)
    flags.add_argument("--field-unit", default=None, choices=FIELD_UNITS)
    flags.add_argument("--field-referencing", default=None, choices=FIELD_REFERENCING)
    flags.add_argument("--remote-segments", help="comma-separated segment numbers")


def settings_from_args(args: argparse.Namespace) -> StudySettings:
    """Settings from a study file, or from flags; flags given beside a file are refused."""
    flag_values = {
        "values": args.values,
        "subjects": args.subjects,
        "reference": args.reference,
        "groups": args.groups,
        "methods": args.methods,
        "segment_model": args.segment_model,
        "ff_unit": args.ff_unit,
        "field_unit": args.field_unit,
        "field_referencing": args.field_referencing,
        "remote_segments": args.remote_segments,
    }
    given = {k: v for k, v in flag_values.items() if v is not None}
    if args.study:
        if given:
            raise SystemExit(
                "cohort: give either a study file or the flags "
                f"({', '.join('--' + k.replace('_', '-') for k in given)}), not both"
            )
        return read_study_file(args.study)
    missing = [k for k in ("values", "subjects", "reference") if k not in given]
    if missing:
        raise SystemExit(
            "cohort: give a study file, or all of " + ", ".join("--" + k for k in missing)
        )
    groups = tuple(g for g in (given.pop("groups", "") or "").split(",") if g.strip())
    methods = tuple(m for m in (given.pop("methods", "") or "").split(",") if m.strip())
    remote = tuple(s for s in (given.pop("remote_segments", "") or "").split(",") if s.strip())
    return build_settings(groups=groups, methods=methods, remote_segments=remote, **given)


def cmd_check(args: argparse.Namespace) -> int:
    study = check_study(settings_from_args(args))
    print(study.summary())
    print(f"\nThe study is usable. {CAUTION}")
    return 0


def cmd_run(args: argparse.Namespace) -> int:
    from cohort.report.study_run import run_study

    def progress(message: str) -> None:
        if not args.quiet:
            print(f"[cohort] {message} ...", file=sys.stderr, flush=True)

    done = run_study(
        settings_from_args(args),
        args.out,
        {
            "seed": args.seed,
            "n_boot": args.bootstrap,
            "figures": False if args.no_figures else None,
            "workers": args.workers,
        },
        force=args.force,
        progress=progress,
        pseudonymize=args.pseudonymize,
        key_file=args.key_file,
        code_list=args.code_list,
    )
    if done.code_list is not None:
        print(f"  pseudonym code list (keep it apart from the report): {done.code_list}")
    print(done.summary.text())
    print(f"\n{CAUTION}")
    return 0


def cmd_demo(args: argparse.Namespace) -> int:
    from cohort.demo import is_demo_folder, write_demo

    folder = Path(args.folder)
    if folder.is_dir() and any(folder.iterdir()) and is_demo_folder(folder) and not args.force:
        print(
            f"cohort: {str(folder)!r} holds an earlier demo; give --force to write it again\n"
            "Nothing was written or removed.",
            file=sys.stderr,
        )
        return 2
    study_file = write_demo(folder, n_subjects=args.subjects, seed=args.seed)
    print(f"wrote an invented demo cohort to {folder} (see {study_file.name}); no real data")
    print(f"next: cohort run {study_file} --out cohort-report")
    return 0


def _demo_size(text: str) -> int:
    try:
        n = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a whole number: {text!r}") from None
    if not DEMO_SUBJECTS.low <= n <= DEMO_SUBJECTS.high:
        raise argparse.ArgumentTypeError(
            f"{n} is outside {DEMO_SUBJECTS.low} to {DEMO_SUBJECTS.high:,} subjects"
        )
    return n


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="cohort",
        description="Cohort statistics for myocardial multi-echo mapping studies. " + CAUTION,
    )
    from cohort import __version__

    parser.add_argument("--version", action="version", version=f"cohort {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)
    check = sub.add_parser("check", help="validate a study and print a summary; writes nothing")
    _add_study_arguments(check)
    check.set_defaults(func=cmd_check)

    run = sub.add_parser("run", help="run every analysis and write the report folder")
    _add_study_arguments(run)
    run.add_argument("--out", required=True, help="output folder (must be empty or new)")
    run.add_argument("--seed", type=int, default=None, help="bootstrap seed")
    run.add_argument(
        "--bootstrap",
        type=int,
        default=None,
        metavar="B",
        help=f"bootstrap resamples (default {DEFAULT_N_BOOT})",
    )
    run.add_argument("--no-figures", action="store_true", help="tables, methods and manifest only")
    run.add_argument(
        "--workers",
        type=int,
        default=None,
        metavar="N",
        help="processes for the agreement statistics and figures (default: one per core, "
        "at most 4; results are the same for any number)",
    )
    run.add_argument(
        "--force",
        action="store_true",
        help="replace the output of an earlier cohort run (never a folder holding anything else)",
    )
    run.add_argument("--quiet", action="store_true", help="no progress messages")
    run.add_argument(
        "--pseudonymize",
        action="store_true",
        help="replace subject IDs in every output by keyed codes (key: --key-file or "
        "the environment variable COHORT_PSEUDONYM_KEY)",
    )
    run.add_argument("--key-file", help="file holding the pseudonymisation key")
    run.add_argument(
        "--code-list", help="where to write the ID-to-code list (default: beside --out)"
    )
    run.set_defaults(func=cmd_run)

    demo = sub.add_parser("demo", help="write the invented demo cohort to a folder")
    demo.add_argument("folder")
    demo.add_argument(
        "--subjects",
        type=_demo_size,
        default=DEMO_SUBJECTS.default,
        help=f"subjects of the invented cohort ({DEMO_SUBJECTS.low} to {DEMO_SUBJECTS.high:,})",
    )
    demo.add_argument("--seed", type=int, default=DEMO_SEED)
    demo.add_argument(
        "--force", action="store_true", help="write again over an earlier demo (nothing else)"
    )
    demo.set_defaults(func=cmd_demo)
    return parser


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    """Warnings on the command line as one plain line each, without Python's source line."""
    print(f"cohort: {category.__name__}: {message}", file=file or sys.stderr, flush=True)


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    shown = warnings.showwarning
    warnings.showwarning = _show_warning
    try:
        return args.func(args)
    except StudyError as exc:
        print(format_problems(exc.problems), file=sys.stderr)
        print("\nThe study is not usable; nothing was written.", file=sys.stderr)
        return 2
    except OutputFolderError as exc:
        print(f"cohort: {exc}", file=sys.stderr)
        print("Nothing was written or removed.", file=sys.stderr)
        return 2
    except KeyboardInterrupt as exc:
        signum = getattr(exc, "signum", signal.SIGINT)
        print(
            f"cohort: interrupted ({signal.Signals(signum).name}); the partial output was "
            "removed and nothing else was touched",
            file=sys.stderr,
        )
        return 128 + signum
    except SystemExit as exc:
        if isinstance(exc.code, str):
            print(exc.code, file=sys.stderr)
            return 2
        raise
    finally:
        warnings.showwarning = shown


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
