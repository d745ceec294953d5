"""The command line: a thin shell over :mod:`ruleguard.pipeline`.

``console()`` is the console entry point (``main(argv) -> int`` and an exit
without the interpreter's teardown, :func:`leave`); ``run(argv, stdout,
stderr)`` does the work with injectable streams so tests need no subprocess.
Nothing else in the package prints or exits.

Exit status (FORMATS.md section 6): 0 clean, 1 findings at or above
``--fail-at``, 2 invalid input, 3 internal error.
"""

from __future__ import annotations

import argparse
import datetime as _dt
import os
import sys
import warnings
from pathlib import Path
from typing import NoReturn, TextIO

from ruleguard import __version__
from ruleguard.errors import InputError

EXIT_CLEAN = 0
EXIT_FINDINGS = 1
EXIT_INPUT = 2
EXIT_INTERNAL = 3

FORMATS = ("text", "json", "sarif", "junit", "markdown", "html")


class _UsageError(Exception):
    def __init__(self, message: str, status: int) -> None:
        super().__init__(message)
        self.status = status


class _Parser(argparse.ArgumentParser):
    """argparse that raises instead of exiting, so run() keeps control."""

    def error(self, message: str) -> None:  # type: ignore[override]
        raise _UsageError(f"{self.format_usage()}{self.prog}: error: {message}", EXIT_INPUT)

    def exit(self, status: int = 0, message: str | None = None) -> None:  # type: ignore[override]
        raise _UsageError(message or "", EXIT_CLEAN if status == 0 else EXIT_INPUT)


def _build_parser() -> _Parser:
    parser = _Parser(
        prog="ruleguard",
        description="Design-rule checks for feedback-control configurations.",
    )
    parser.add_argument("--version", action="store_true", help="print the version and stop")
    sub = parser.add_subparsers(dest="command", parser_class=_Parser)

    check = sub.add_parser("check", help="analyse the loops of a project and apply the ruleset")
    check.add_argument(
        "files",
        nargs="*",
        help="changed files: only the loops whose inputs are among them are checked",
    )
    check.add_argument("--manifest", help="path of ruleguard.toml / ruleguard.json")
    check.add_argument("--format", choices=FORMATS, default="text", dest="output_format")
    check.add_argument(
        "--output", help="write the chosen format to this file; the terminal gets text"
    )
    check.add_argument("--only", action="append", default=[], metavar="RULE_OR_FAMILY")
    check.add_argument("--skip", action="append", default=[], metavar="RULE_OR_FAMILY")
    check.add_argument("--fail-at", choices=("error", "warning", "note"), default="error")
    check.add_argument("-q", "--quiet", action="store_true", help="findings only, no tables")
    check.add_argument("--no-cache", action="store_true", help="neither read nor write the cache")
    check.add_argument(
        "--time-budget",
        type=float,
        default=600.0,
        metavar="SECONDS",
        help="wall-clock budget of the check; loops not reached are reported as not analysed",
    )
    check.add_argument(
        "--jobs",
        type=int,
        default=None,
        metavar="N",
        help="workers for the variants (default: the number of cores; docs/scaling.md)",
    )
    check.add_argument(
        "--executor",
        choices=("local", "dask"),
        default="local",
        help="local: this machine; dask: a Dask cluster (extra 'cluster')",
    )
    check.add_argument(
        "--cluster-address",
        metavar="ADDRESS",
        help="scheduler of --executor dask (default: a local cluster of --jobs workers)",
    )
    check.add_argument(
        "--timings",
        action="store_true",
        help="print the seconds spent in each stage of the run to stderr",
    )
    check.add_argument(
        "--as-of",
        metavar="YYYY-MM-DD",
        help="evaluate waiver expiry as of this date (default: today, UTC)",
    )

    rules = sub.add_parser("rules", help="list every rule with its severity in a ruleset")
    rules.add_argument(
        "--ruleset",
        default=None,
        help="built-in name or path (default: the project's ruleset, else baseline)",
    )
    rules.add_argument("--manifest", help="take the ruleset from this project")

    explain = sub.add_parser("explain", help="what a rule checks, why, and how to fix it")
    explain.add_argument("rule")

    schema = sub.add_parser("schema", help="print the JSON Schema of an input or of the report")
    schema.add_argument("name")

    init = sub.add_parser("init", help="write a starter manifest, registry and ruleset")
    init.add_argument("folder", nargs="?", default=".")
    return parser


def console() -> NoReturn:
    """The ``ruleguard`` command and ``python -m ruleguard``: :func:`main`, then :func:`leave`.

    The process is the command's own: a run that analyses many loops in it
    may tune its allocator (:mod:`ruleguard.allocator`).
    """
    from ruleguard.allocator import claim_process

    claim_process()
    leave(main())


def leave(code: int) -> NoReturn:
    """End the process with status ``code``, skipping the interpreter's teardown
    when nothing depends on it.

    After a check, freeing every module and object one by one (numpy's
    included) costs 20-30 ms of a hook run that is otherwise about 0.25 s
    (measured on the demo, docs/scaling.md). What an exit must still do is
    done here, in the interpreter's own order: wait for other threads (if
    any is alive the ordinary exit is taken instead), run the ``atexit``
    functions (process pools, temporary folders, coverage tools), flush the
    standard streams; then ``os._exit``. Every file ruleguard writes is closed
    before this point (``Path.write_text``, ``with`` blocks).
    """
    threading = sys.modules.get("threading")
    run_exit_functions = getattr(__import__("atexit"), "_run_exitfuncs", None)
    if run_exit_functions is None or (threading is not None and threading.active_count() > 1):
        sys.exit(code)
    run_exit_functions()
    try:
        sys.stdout.flush()
        sys.stderr.flush()
    except (OSError, ValueError):  # a closed or broken pipe: let the ordinary exit report it
        sys.exit(code)
    os._exit(code)


def main(argv: list[str] | None = None) -> int:
    """Run the command line ``argv`` (default: the process's) and return its exit status."""
    _single_threaded_linear_algebra()
    code = run(sys.argv[1:] if argv is None else argv, stdout=sys.stdout, stderr=sys.stderr)
    return code


def _single_threaded_linear_algebra() -> None:
    """Ask the BLAS libraries for one thread (unless the user chose otherwise).

    ruleguard's matrices are small (order < 200): with two BLAS threads a 5 x 5
    matrix exponential costs about 16 ms, with one about 0.02 ms (measured
    here). Must run before numpy is first imported.
    """
    for name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(name, "1")


def run(argv: list[str], stdout: TextIO, stderr: TextIO) -> int:
    """Run one command; never raises, never exits, returns the exit status."""
    try:
        args = _build_parser().parse_args(argv)
    except _UsageError as exc:
        text = str(exc).strip()
        if text:
            stderr.write(text + "\n")
        return exc.status
    try:
        with warnings.catch_warnings():
            # numpy's overflow chatter is not for users: numerical caveats
            # reach the report as notes (NumericalWarning, via the pipeline).
            warnings.simplefilter("ignore")
            return _dispatch(args, stdout, stderr)
    except InputError as exc:
        stderr.write(format_input_error(exc) + "\n")
        return EXIT_INPUT
    except KeyboardInterrupt:
        stderr.write("ruleguard: interrupted\n")
        return EXIT_INTERNAL
    except Exception as exc:  # a bug: say so, never show a traceback
        stderr.write(
            "ruleguard: internal error (a bug in ruleguard, not in your files): "
            f"{type(exc).__name__}: {exc}\n"
            "Please report it with the command line and the input files.\n"
        )
        if os.environ.get("RULEGUARD_DEBUG"):
            import traceback

            traceback.print_exc(file=stderr)
        return EXIT_INTERNAL


def _dispatch(args: argparse.Namespace, stdout: TextIO, stderr: TextIO) -> int:
    if args.version:
        stdout.write(f"ruleguard {__version__}\n")
        return EXIT_CLEAN
    if args.command == "check":
        return _cmd_check(args, stdout, stderr)
    if args.command == "rules":
        return _cmd_rules(args, stdout)
    if args.command == "explain":
        return _cmd_explain(args, stdout, stderr)
    if args.command == "schema":
        return _cmd_schema(args, stdout, stderr)
    if args.command == "init":
        return _cmd_init(args, stdout, stderr)
    _build_parser().print_help(stdout)
    return EXIT_INPUT


def format_input_error(exc: InputError) -> str:
    """``file:line:column: error: [key] message`` (GNU convention)."""
    loc = exc.location
    place = loc.file or "<input>"
    if loc.line is not None:
        place += f":{loc.line}"
        if loc.column is not None:
            place += f":{loc.column}"
    key = f" [{loc.key}]" if loc.key else ""
    excerpt = f"\n{exc.excerpt}" if getattr(exc, "excerpt", None) else ""
    return f"{place}: error:{key} {exc.message}{excerpt}"


# ---------------------------------------------------------------- commands
def _parse_date(text: str | None) -> _dt.date:
    if text is None:
        return _dt.datetime.now(_dt.timezone.utc).date()
    try:
        return _dt.date.fromisoformat(text)
    except ValueError as exc:
        raise InputError(
            "<command line>", None, None, "--as-of", f"not a date (YYYY-MM-DD): {text!r}"
        ) from exc


def _cmd_check(args: argparse.Namespace, stdout: TextIO, stderr: TextIO) -> int:
    from ruleguard.timings import StageClock, recording, render_table

    clock = StageClock() if args.timings else None
    with recording(clock):
        code = _run_check(args, stdout, stderr, clock)
    if clock is not None:
        stderr.write(render_table(clock))
    return code


def _run_check(args: argparse.Namespace, stdout: TextIO, stderr: TextIO, clock) -> int:
    from ruleguard.pipeline import CheckOptions, RunStatistics, check_project
    from ruleguard.rules.base import Severity
    from ruleguard.timings import stage

    options = CheckOptions(
        only=tuple(args.only),
        skip=tuple(args.skip),
        fail_at=Severity(args.fail_at),
        today=_parse_date(args.as_of),
        changed_files=tuple(args.files),
        cwd=os.getcwd(),
        use_cache=not args.no_cache,
        time_budget_s=args.time_budget if args.time_budget > 0 else None,
        want_curves=args.output_format == "html",
        jobs=_jobs(args.jobs),
        executor=args.executor,
        cluster_address=args.cluster_address,
    )
    with stage("load"):
        manifest = _manifest_path(args.manifest, tuple(args.files))
    progress = _progress_for(stderr, quiet=args.quiet or args.output_format != "text")
    statistics = RunStatistics()
    report = check_project(manifest, options, progress=progress, statistics=statistics)
    if clock is not None:
        clock.count("loops analysed", statistics.analysed_loops)
        clock.count("loops from the cache", statistics.cached_loops)

    with stage("report"):
        if args.output:
            out_path = Path(args.output)
            _refuse_input_overwrite(out_path, report)
            text = _render(report, args.output_format, stream=None, quiet=args.quiet)
            out_path.parent.mkdir(parents=True, exist_ok=True)
            out_path.write_text(text, encoding="utf-8")
            stdout.write(_render(report, "text", stream=stdout, quiet=args.quiet))
        else:
            stdout.write(_render(report, args.output_format, stream=stdout, quiet=args.quiet))
    return EXIT_FINDINGS if report.failed else EXIT_CLEAN


def _jobs(given: int | None) -> int:
    from ruleguard.executors import default_jobs

    if given is None:
        return default_jobs()
    if given < 1:
        raise InputError("<command line>", None, None, "--jobs", f"need N >= 1, got {given}")
    return given


def _refuse_input_overwrite(out_path: Path, report) -> None:
    root = Path(report.root)
    target = out_path.resolve()
    for rel in report.texts:
        if (root / rel).resolve() == target:
            raise InputError(
                "<command line>", None, None, "--output",
                f"refusing to write the report over the input file {rel}",
            )


def _render(report, fmt: str, *, stream: TextIO | None, quiet: bool) -> str:
    if fmt == "json":
        from ruleguard.report import json_report

        return json_report.render(report)
    if fmt == "sarif":
        from ruleguard.report import sarif

        return sarif.render(report)
    if fmt == "junit":
        from ruleguard.report import junit

        return junit.render(report)
    if fmt == "markdown":
        from ruleguard.report import markdown

        return markdown.render(report)
    if fmt == "html":
        from ruleguard.report import html

        return html.render(report)
    from ruleguard.report import text

    return text.render(report, color=text.wants_color(stream), quiet=quiet, base_dir=os.getcwd())


def _progress_for(stderr: TextIO, *, quiet: bool):
    """A progress callback on a terminal's stderr (never on machine output)."""
    isatty = getattr(stderr, "isatty", None)
    if quiet or not (isatty and isatty()):
        return None
    from ruleguard.report.progress import TerminalProgress

    return TerminalProgress(stderr)


def _manifest_path(given: str | None, files: tuple[str, ...] = ()) -> Path:
    """The manifest: given, else in the current folder or above, else above the files.

    A pre-commit hook runs at the repository root and passes staged names;
    when the project's manifest sits in a subfolder, it is found from the
    files themselves (all of them must lead to the same manifest).
    """
    from ruleguard.load.project import find_manifest

    if given:
        return Path(given)
    try:
        return find_manifest(Path.cwd())
    except InputError:
        if not files:
            raise
    found: set[Path] = set()
    for name in files:
        try:
            found.add(find_manifest(Path(name).resolve().parent))
        except InputError:
            continue
    if len(found) == 1:
        return found.pop()
    if not found:
        return find_manifest(Path.cwd())  # raises the usual "no manifest" error
    raise InputError(
        "<command line>", None, None, "--manifest",
        "the given files belong to several manifests ("
        + ", ".join(sorted(str(p) for p in found))
        + "); run once per project with --manifest PATH",
    )


def _cmd_rules(args: argparse.Namespace, stdout: TextIO) -> int:
    from ruleguard.report.catalog_view import render_rules_table

    ruleset = _ruleset_for_listing(args)
    from ruleguard.report.text import wants_color

    stdout.write(render_rules_table(ruleset, color=wants_color(stdout)))
    return EXIT_CLEAN


def _ruleset_for_listing(args: argparse.Namespace):
    """--ruleset, else the ruleset of --manifest or of the project found here, else baseline."""
    from ruleguard.load.project import find_manifest, load_project
    from ruleguard.load.rulesets import load_ruleset
    from ruleguard.location import Location

    if args.ruleset:
        where = Location("<command line>", None, None, "--ruleset")
        return load_ruleset(os.getcwd(), args.ruleset, where)
    manifest = Path(args.manifest) if args.manifest else None
    if manifest is None:
        try:
            manifest = find_manifest(Path.cwd())
        except InputError:
            manifest = None
    if manifest is not None:
        project = load_project(manifest)
        return load_ruleset(project.root, project.ruleset, project.ruleset_location)
    where = Location("<command line>", None, None, "--ruleset")
    return load_ruleset(os.getcwd(), "baseline", where)


def _cmd_explain(args: argparse.Namespace, stdout: TextIO, stderr: TextIO) -> int:
    from ruleguard.rules.catalog import RULES, explain

    if args.rule not in RULES:
        import difflib

        close = difflib.get_close_matches(args.rule, list(RULES), n=1)
        hint = f" (did you mean {close[0]!r}?)" if close else ""
        stderr.write(f"ruleguard: no rule {args.rule!r}{hint}; `ruleguard rules` lists them\n")
        return EXIT_INPUT
    stdout.write(explain(args.rule).rstrip("\n") + "\n")
    return EXIT_CLEAN


def _cmd_schema(args: argparse.Namespace, stdout: TextIO, stderr: TextIO) -> int:
    from ruleguard.load.schemas import schema_names, schema_text

    if args.name not in schema_names():
        stderr.write(
            f"ruleguard: no schema {args.name!r}; known: {', '.join(schema_names())}\n"
        )
        return EXIT_INPUT
    stdout.write(schema_text(args.name).rstrip("\n") + "\n")
    return EXIT_CLEAN


def _cmd_init(args: argparse.Namespace, stdout: TextIO, stderr: TextIO) -> int:
    from ruleguard.starter import StarterExists, write_starter

    try:
        written = write_starter(Path(args.folder))
    except StarterExists as exc:
        stderr.write(f"ruleguard: {exc}\n")
        return EXIT_INPUT
    for path in written:
        stdout.write(f"wrote {path}\n")
    return EXIT_CLEAN
