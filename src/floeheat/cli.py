"""The ``floeheat`` command line: one sub-command per user task.

Heavy imports happen inside each command so that ``floeheat --help`` is instant.
No traceback reaches the user for a problem with their input: such problems are
printed as messages naming the place and the fix, with a non-zero exit status.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from floeheat import __version__
from floeheat.errors import ArchiveError

__all__ = ["main", "build_parser"]


def _cmd_synth(args: argparse.Namespace) -> int:
    from floeheat.synth import SIZES, write_archive

    if args.size not in SIZES:
        print(f"floeheat synth: unknown size {args.size!r}; choose one of {sorted(SIZES)}",
              file=sys.stderr)
        return 2
    truth_path = write_archive(Path(args.outdir), seed=args.seed, size=args.size,
                               hemisphere=args.hemisphere, variant=args.variant)
    print(f"archive written to {args.outdir}")
    print(f"truth written to {truth_path} (outside the archive)")
    return 0


def _cmd_check(args: argparse.Namespace) -> int:
    from floeheat.check import check_archive, format_report

    report = check_archive(Path(args.archive))
    print(format_report(report))
    return 1 if report.blocking else 0


#: Where `pin` finds the schema and the lock file by default (the repository root).
_SCHEMA = "workflow/schemas/config.schema.yaml"
_LOCK = "requirements.lock"


def _cmd_pin(args: argparse.Namespace) -> int:
    from floeheat.reproduce import PinError, make_pin, write_pin

    try:
        pin = make_pin(args.archive, args.config, args.name, args.schema, args.lock)
        path = write_pin(pin, args.out)
    except PinError as exc:
        print(f"floeheat pin: {exc}", file=sys.stderr)
        return 2
    block = pin["pin"]
    print(f"pinned run '{args.name}' written to {path}: {len(block['archive_files'])} "
          f"archive files, floeheat {block['floeheat_version']}, lock "
          f"{(block['requirements_lock_sha256'] or 'absent')[:12]}")
    print(f"run it with: snakemake --profile profiles/default --configfile {path}")
    return 0


def _cmd_verify(args: argparse.Namespace) -> int:
    from floeheat.reproduce import PinError, format_verify, verify

    try:
        report = verify(args.results, args.against)
    except PinError as exc:
        print(f"floeheat verify: {exc}", file=sys.stderr)
        return 2
    print(format_verify(report, all_lines=args.all))
    return 0 if report.ok else 1


def build_parser() -> argparse.ArgumentParser:
    """Build the argument parser with every sub-command and its help."""
    parser = argparse.ArgumentParser(
        prog="floeheat",
        description="Upper-ocean heat budgets under drifting sea ice, from archives of "
        "ice-camp buoys and matching satellite data. Research estimates only: not for "
        "navigation or on-ice safety decisions.",
    )
    parser.add_argument("--version", action="version", version=f"floeheat {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser(
        "synth",
        help="write a synthetic archive (format version 1) and its truth",
        description="Write a complete synthetic archive from a physical forward model, "
        "with the truth it was made from written beside the archive (OUTDIR.truth/), "
        "never inside it. Deterministic for a seed.",
    )
    p.add_argument("outdir", help="folder to write the archive into (created)")
    p.add_argument("--seed", type=int, default=1, help="random seed (default 1)")
    p.add_argument("--size", default="demo",
                   help="tiny (tests), demo (default), or a benchmark size")
    p.add_argument("--hemisphere", choices=["north", "south"], default="north",
                   help="which polar ocean the invented scenario lies in (default north)")
    p.add_argument("--variant", choices=["none", "shelf"], default="none",
                   help="scenario variant: shelf puts a shallow bank where one array's "
                        "track ends (default none)")
    p.set_defaults(func=_cmd_synth)

    p = sub.add_parser(
        "check",
        help="validate an archive before a long run",
        description="List every problem in an archive at once, each naming the file, "
        "the variable or row, what is wrong and how to fix it; then print a summary per "
        "deployment. Exits 1 when anything blocks processing.",
    )
    p.add_argument("archive", help="archive root folder (holds deployments.csv)")
    p.set_defaults(func=_cmd_check)

    p = sub.add_parser(
        "pin",
        help="pin a run: every setting, the software and the archive's checksums",
        description="Write config/runs/NAME.yaml: the full resolved config of CONFIG run on "
        "ARCHIVE (every default filled in from the schema), the floeheat version, the "
        "sha256 of requirements.lock and of every archive file. Run the workflow with "
        "--configfile on it; the run refuses to start when any of these differ, unless "
        "given --config pin_override=true. Run from the repository root.",
    )
    p.add_argument("archive", help="archive root folder (holds deployments.csv), as the "
                   "workflow will be given it (relative to the repository root or absolute)")
    p.add_argument("--config", default="config/config.yaml",
                   help="settings to pin (default config/config.yaml); missing keys take "
                   "the schema's defaults")
    p.add_argument("--name", required=True, help="name of the pinned run (the file NAME.yaml)")
    p.add_argument("--out", default="config/runs",
                   help="folder to write NAME.yaml into (default config/runs)")
    p.add_argument("--schema", default=_SCHEMA, help=f"config schema (default {_SCHEMA})")
    p.add_argument("--lock", default=_LOCK, help=f"lock file (default {_LOCK})")
    p.set_defaults(func=_cmd_pin)

    p = sub.add_parser(
        "verify",
        help="compare a run's outputs with a manifest",
        description="Recompute the checksums of every output in RESULTS and compare them "
        "with MANIFEST: each output is identical, different, missing or new. For a CSV "
        "table that differs, the first differing row (line number and key columns) and "
        "column are shown with both values, when the reference table lies beside the "
        "manifest (MANIFEST's folder + the table's relative path). Exits 0 when all are "
        "identical, 1 on any difference, 2 when an input cannot be read.",
    )
    p.add_argument("results", help="results folder of the run to check")
    p.add_argument("--against", required=True, metavar="MANIFEST",
                   help="manifest.json of the reference run")
    p.add_argument("--all", action="store_true", help="list identical outputs too")
    p.set_defaults(func=_cmd_verify)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the command line; return the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return int(args.func(args) or 0)
    except ArchiveError as exc:
        print(f"floeheat {args.command}: {exc}", file=sys.stderr)
        return 1
    except (FileNotFoundError, PermissionError, IsADirectoryError, NotADirectoryError) as exc:
        print(f"floeheat {args.command}: {exc.strerror or exc}: {exc.filename}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
