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
                               hemisphere=args.hemisphere)
    print(f"archive written to {args.outdir}")
    print(f"truth written to {truth_path} (outside the archive)")
    return 0


def _cmd_check(args: argparse.Namespace) -> int:
    from floeheat.check import check_archive, format_report

    report = check_archive(Path(args.archive))
    print(format_report(report))
    return 1 if report.blocking else 0


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
