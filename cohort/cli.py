"""The ``cohort`` command: a thin layer over the Python API.

Exit status: 0 when the study is usable, 2 on invalid input (problems on stderr, no
traceback), 1 on an unexpected internal failure.
"""

from __future__ import annotations

import argparse
import os
import signal
import sys
import warnings
from collections.abc import Sequence
from pathlib import Path

from cohort.domain.cautions import CAUTION
from cohort.domain.problems import StudyError, format_problems
from cohort.io.settings import StudySettings, build_settings, read_study_file
from cohort.io.study import load_study
from cohort.report.destination import OutputFolderError, ReservedFile, check_destination


def _add_study_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("study", nargs="?", help="study file (study.toml)")
    flags = parser.add_argument_group("without a study file")
    flags.add_argument("--values", help="values table (CSV, TSV, XLSX or Parquet)")
    flags.add_argument("--subjects", help="subjects table (CSV, TSV, XLSX or Parquet)")
    flags.add_argument("--reference", help="name of the reference method")
    flags.add_argument("--groups", help="comma-separated group names, in display order")
    flags.add_argument("--segment-model", default=None, choices=("aha17", "aha16"))
    flags.add_argument("--ff-unit", default=None, choices=("percent", "fraction"))
    flags.add_argument("--field-unit", default=None, choices=("Hz", "ppm"))
    flags.add_argument(
        "--field-referencing", default=None, choices=("none", "subject-median", "remote")
    )
    flags.add_argument("--remote-segments", help="comma-separated segment numbers")


def settings_from_args(args: argparse.Namespace) -> StudySettings:
    """Settings from a study file, or from flags; flags given beside a file are refused."""
    flag_values = {
        "values": args.values,
        "subjects": args.subjects,
        "reference": args.reference,
        "groups": args.groups,
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
    remote = tuple(s for s in (given.pop("remote_segments", "") or "").split(",") if s.strip())
    return build_settings(groups=groups, remote_segments=remote, **given)


def cmd_check(args: argparse.Namespace) -> int:
    settings = settings_from_args(args)
    study = load_study(settings)
    print(study.summary())
    print(f"\nThe study is usable. {CAUTION}")
    return 0


def _input_paths(settings: StudySettings, *extra: str | None) -> list[Path]:
    """Every file a run reads: none of them may be written or sit inside ``--out``."""
    paths = [settings.values, settings.subjects, settings.study_file, *extra]
    return [Path(p) for p in paths if p]


def _is_code_list(path: Path) -> bool:
    """Whether ``path`` is a code list written by ``cohort run --pseudonymize`` (its header
    is exactly :data:`cohort.io.pseudonyms.CODE_LIST_COLUMNS`): the only kind of existing file
    that a new code list may replace."""
    from cohort.io.pseudonyms import CODE_LIST_COLUMNS

    try:
        with path.open(encoding="utf-8") as handle:
            header = tuple(handle.readline().rstrip("\r\n").split(","))
    except (OSError, UnicodeDecodeError):
        return False
    return header == tuple(CODE_LIST_COLUMNS)


def _reserve_code_list(args: argparse.Namespace, inputs: list[Path]) -> ReservedFile:
    """Where the code list goes, checked and reserved before the analysis: outside
    ``--out``, not an input, replacing nothing but an earlier code list."""
    out = Path(os.path.abspath(args.out))
    path = Path(os.path.abspath(args.code_list or out.with_name(f"{out.name}-pseudonym-codes.csv")))
    real = Path(os.path.realpath(path))
    if Path(os.path.realpath(out)) in (real, *real.parents):
        raise OutputFolderError("--code-list must be outside the output folder")
    if any(Path(os.path.realpath(p)) == real for p in inputs):
        raise OutputFolderError(f"--code-list {str(path)!r} is an input file; give a new file")
    return ReservedFile(path, _is_code_list, "--code-list")


def cmd_run(args: argparse.Namespace) -> int:
    from cohort.analysis.pipeline import options_from_study
    from cohort.report.runner import run

    settings = settings_from_args(args)
    inputs = _input_paths(settings, args.key_file)
    check_destination(args.out, inputs, force=args.force)  # before any work
    code_list = _reserve_code_list(args, inputs) if args.pseudonymize else None
    try:
        study = load_study(settings)
        if args.pseudonymize:
            from cohort.io.pseudonyms import load_key, pseudonymize_study

            study, codes = pseudonymize_study(study, load_key(args.key_file))
        options = options_from_study(
            study,
            seed=args.seed,
            n_boot=args.bootstrap,
            figures=False if args.no_figures else None,
            workers=args.workers,
        )

        def progress(message: str) -> None:
            if not args.quiet:
                print(f"[cohort] {message} ...", file=sys.stderr, flush=True)

        summary = run(
            study,
            args.out,
            options,
            force=args.force,
            progress=progress,
            pseudonymized=args.pseudonymize,
            protect=inputs,
        )
        if code_list is not None:
            path = code_list.commit(lambda temporary: codes.to_csv(temporary, index=False))
            print(f"  pseudonym code list (keep it apart from the report): {path}")
    finally:
        if code_list is not None:
            code_list.discard()
    print(summary.text())
    print(f"\n{CAUTION}")
    return 0


def cmd_demo(args: argparse.Namespace) -> int:
    from cohort.demo import is_demo_folder, write_demo

    folder = Path(args.folder)
    if folder.is_dir() and any(folder.iterdir()) and is_demo_folder(folder) and not args.force:
        print(
            f"cohort: {str(folder)!r} holds an earlier demo; give --force to write it again",
            file=sys.stderr,
        )
        return 2
    study_file = write_demo(folder, n_subjects=args.subjects, seed=args.seed)
    print(f"wrote an invented demo cohort to {folder} (see {study_file.name}); no real data")
    print(f"next: cohort run {study_file} --out cohort-report")
    return 0


DEMO_SUBJECTS = (6, 100_000)
"""Sizes of the demo cohort: at least two subjects per group, at most what the scale
benchmark uses."""


def _demo_size(text: str) -> int:
    try:
        n = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a whole number: {text!r}") from None
    if not DEMO_SUBJECTS[0] <= n <= DEMO_SUBJECTS[1]:
        raise argparse.ArgumentTypeError(
            f"{n} is outside {DEMO_SUBJECTS[0]} to {DEMO_SUBJECTS[1]:,} subjects"
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
        help="bootstrap resamples (default 2000)",
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
        default=48,
        help=f"subjects of the invented cohort ({DEMO_SUBJECTS[0]} to {DEMO_SUBJECTS[1]:,})",
    )
    demo.add_argument("--seed", type=int, default=20261202)
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
