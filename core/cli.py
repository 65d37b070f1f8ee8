"""The ``kipup`` command line.

``kipup check FILE...`` validates kipup documents, choosing the checker from each
document's ``format:`` key (see :data:`FORMATS`); ``kipup bench ...`` runs the benchmarks
in :mod:`kipup.core.bench`. Exit status: 0 when everything is fine, 2 on any problem or a
usage error.
"""
from __future__ import annotations

import argparse
import importlib
import sys
from typing import Any, Callable, Sequence

from .robot_file import DOCUMENT, Problem, RobotFileError, read_yaml_file, robot_from_dict, validate_robot_dict
from .trick_file import check_trick

__all__ = ["HARDWARE_CAUTION", "FORMATS", "check_document", "check_file", "main"]

HARDWARE_CAUTION = ("Caution: simulate every trajectory first, and run it on hardware only under "
                    "your lab's safety rules and local regulations.")

#: A checker takes a parsed document and returns ``(problems, summary)``; the summary
#: (e.g. ``robot tumbli, 6 links, nq=8``) is shown when there are no problems.
Checker = Callable[[Any], tuple[list[Problem], str]]


def _check_robot(data: Any) -> tuple[list[Problem], str]:
    problems = validate_robot_dict(data)
    if problems:
        return problems, ""
    try:
        robot = robot_from_dict(data)
    except RobotFileError as exc:
        return list(exc.problems), ""
    return [], f"robot {robot.name}, {len(robot.links)} links, nq={robot.nq}"


#: Checkers by document format. Add ``"kipup-trick/1": check_trick`` here for trick files.
FORMATS: dict[str, Checker] = {
    "kipup-robot/1": _check_robot,
    "kipup-trick/1": check_trick,
}


def check_document(data: Any) -> tuple[list[Problem], str]:
    """Check a parsed document with the checker its ``format:`` key names: ``(problems, summary)``."""
    known = ", ".join(FORMATS)
    if not isinstance(data, dict):
        return [Problem(DOCUMENT, f"must be a mapping with a format: key (one of {known})")], ""
    if "format" not in data:
        return [Problem("format", f"required field is missing; known formats: {known}")], ""
    fmt = data["format"]
    checker = FORMATS.get(fmt) if isinstance(fmt, str) else None
    if checker is None:
        return [Problem("format", f"unknown format {fmt!r}; known formats: {known}")], ""
    return checker(data)


def check_file(path: str) -> tuple[list[Problem], str]:
    """Read, parse and check one file: ``(problems, summary)``. Never raises for bad input."""
    data, problems = read_yaml_file(path)
    if problems:
        return problems, ""
    return check_document(data)


def _cmd_check(args: argparse.Namespace) -> int:
    status = 0
    for path in args.files:
        problems, summary = check_file(path)
        if problems:
            status = 2
            for p in problems:
                print(f"{path}: {p.path}: {p.message}")
        else:
            print(f"{path}: ok ({summary})")
    return status


def _cmd_bench(rest: list[str]) -> int:
    name = f"{__package__ or 'kipup.core'}.bench"
    try:
        bench = importlib.import_module(name)  # lazy: `kipup check` must work without it
    except ModuleNotFoundError as exc:
        if exc.name != name:
            raise
        print("kipup bench: not available (kipup.core.bench is not installed)", file=sys.stderr)
        return 2
    try:
        rc = bench.main(rest)
    except SystemExit as exc:  # an argparse inside bench
        rc = exc.code
    return _exit_code(rc)


def _exit_code(code: Any) -> int:
    if code is None:
        return 0
    if isinstance(code, int):
        return code
    print(code, file=sys.stderr)
    return 1


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of ``kipup`` (``bench`` arguments are parsed by kipup.core.bench)."""
    fmt = argparse.RawDescriptionHelpFormatter  # keeps the caution on one line
    parser = argparse.ArgumentParser(
        prog="kipup", formatter_class=fmt, epilog=HARDWARE_CAUTION,
        description="kipup: design acrobatic motions of planar legged robots.")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    check = sub.add_parser(
        "check", formatter_class=fmt, epilog=HARDWARE_CAUTION,
        help="validate robot files (and other kipup documents)",
        description="Validate kipup documents, choosing the checker from each file's format: key "
                    f"(known: {', '.join(FORMATS)}). Prints 'FILE: ok (...)' or one 'FILE: path: message' "
                    "line per problem; exit status 0 if every file is valid, 2 otherwise.")
    check.add_argument("files", nargs="+", metavar="FILE", help="YAML file to check")
    check.set_defaults(func=_cmd_check)
    from .cli_solve import add_parsers
    from .cli_render import add_parsers as add_render_parsers
    from .cli_io import add_parsers as add_io_parsers
    from .cli_simulate import add_parsers as add_simulate_parsers

    add_parsers(sub, fmt, HARDWARE_CAUTION)
    add_render_parsers(sub, fmt, HARDWARE_CAUTION)
    add_io_parsers(sub, fmt, HARDWARE_CAUTION)
    add_simulate_parsers(sub, fmt, HARDWARE_CAUTION)
    sub.add_parser("bench", add_help=False, help="run the benchmarks (kipup bench --help for options)")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run ``kipup`` with ``argv`` (default ``sys.argv[1:]``); returns the exit status."""
    args_list = list(sys.argv[1:] if argv is None else argv)
    if args_list and args_list[0] == "bench":
        return _cmd_bench(args_list[1:])
    parser = build_parser()
    try:
        args = parser.parse_args(args_list)
    except SystemExit as exc:  # --help (0) or a usage error (2)
        return _exit_code(exc.code)
    if args.command is None:
        parser.print_help()
        return 2
    return int(args.func(args))


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
