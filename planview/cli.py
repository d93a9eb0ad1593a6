"""The command line: ``planview check PATH|-`` and ``planview demo``.

Exit codes of ``check``: 0 no origin at or above ``--fail-at``; 1 at least one (for CI
gating); 2 unreadable input, with a one-line message on stderr and no traceback; 3 an
internal error (a bug): one line, and its traceback when ``PLANVIEW_DEBUG`` is set. Every line on stderr, and every probe
line, has the passwords of the ``--probe`` and ``--dsn`` connection strings (and of
``PLANVIEW_DSN``, and anything shaped like a credential) masked.

``planview check --dsn URL --sql "SELECT ..."`` reviews a statement on a live database (the
DSN may come from ``PLANVIEW_DSN``). Caution: EXPLAIN ANALYZE really runs the statement; run
it on a replica or a copy. A statement that may change data is refused unless
``--allow-writes``, and every run is rolled back.
"""

from __future__ import annotations

import argparse
import os
import sys
import traceback
from pathlib import Path

from .errors import PlanviewError
from .redact import redact


class _Parser(argparse.ArgumentParser):
    """argparse, whose error lines quote the arguments: masked like every other message."""

    secrets: tuple[str, ...] = ()

    def error(self, message: str):
        self.print_usage(sys.stderr)
        self.exit(2, f"{self.prog}: error: {redact(message, *self.secrets)}\n")


DSN_VARIABLE = "PLANVIEW_DSN"


def _probe_arguments(argv: list[str]) -> tuple[str, ...]:
    """The connection strings given to --probe or --dsn (or an abbreviation argparse accepts),
    and PLANVIEW_DSN's, found before argparse, which may fail, runs."""
    found = [os.environ[DSN_VARIABLE]] if os.environ.get(DSN_VARIABLE) else []
    for i, arg in enumerate(argv):
        option, equals, value = arg.partition("=")
        if not ((len(option) >= 4 and "--probe".startswith(option))
                or (len(option) >= 3 and "--dsn".startswith(option))):
            continue
        if equals:
            found.append(value)
        elif i + 1 < len(argv):
            found.append(argv[i + 1])
    return tuple(found)


def _engine_names() -> list[str]:
    from . import engines

    return sorted(engines.engines())


def _format_names() -> tuple[str, ...]:
    from . import engines

    return engines.formats()


def _engine_name(value: str) -> str:
    """An --engine value as the engine's own name; argparse names the option when it is refused."""
    from . import engines

    found = engines.aliases().get(value.strip().lower())
    if found is None:
        spellings = sorted(a for a, name in engines.aliases().items() if a != name)
        raise argparse.ArgumentTypeError(
            f"unknown engine {value!r}; valid values: {', '.join(_engine_names())}"
            + (f" (also {', '.join(spellings)})" if spellings else ""))
    return found


def _format_name(value: str) -> str:
    name = value.strip().lower()
    if name not in _format_names():
        raise argparse.ArgumentTypeError(
            f"unknown format {value!r}; valid values: {', '.join(_format_names())}")
    return name


EXIT_CODES = """exit codes:
  0  no origin reaches --fail-at
  1  an origin reaches --fail-at (a CI gate fails); for a folder, in any of its plans
  2  the input or an option was refused (one line names the line, key or option); in a
     folder an unreadable file is listed with its reason and is never a 2
  3  an internal error (one line; PLANVIEW_DEBUG=1 adds the traceback)
"""


FOLDER_OUT = "planview-review"
"""Where ``planview check FOLDER`` writes its pages unless --out says otherwise."""


def _parser(secrets: tuple[str, ...] = ()) -> argparse.ArgumentParser:
    parser = _Parser(prog="planview", description=__doc__.splitlines()[0], epilog=EXIT_CODES,
                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.secrets = secrets
    sub = parser.add_subparsers(dest="command", required=True)
    check = sub.add_parser("check", help="check one plan (a path, or - for standard input) or a folder of plans",
                           epilog=EXIT_CODES, formatter_class=argparse.RawDescriptionHelpFormatter)
    check.add_argument("path", nargs="?",
                       help="a plan file, - to read standard input, or a folder: every plan in it gets a "
                            "review page and one line here, and --out gets index.html (leave out with --dsn)")
    check.add_argument("--engine", type=_engine_name,
                       help=f"force the engine: {', '.join(_engine_names())} (default: detected)")
    check.add_argument("--format", dest="fmt", type=_format_name,
                       help=f"force the format: {', '.join(_format_names())} (default: detected)")
    check.add_argument("--threshold", type=float, default=10.0,
                       help="own q-error that makes a node an origin (default 10)")
    check.add_argument("--fail-at", type=float, default=10.0,
                       help="exit 1 when an origin's q-error is at least this (default 10)")
    check.add_argument("--json", action="store_true", help="print the JSON report")
    check.add_argument("--html", metavar="OUT", help="also write the self-contained review page")
    check.add_argument("--markdown", metavar="OUT", help="also write the ticket body")
    check.add_argument("--width", type=int, help="terminal width for the table (default: the terminal's)")
    check.add_argument("--query", metavar="FILE",
                       help="the statement's SQL text, shown beside the plan and in the ticket "
                            "(default: the Query Text the paste holds, if any)")
    check.add_argument("--out", metavar="DIR",
                       help=f"with a folder: where the review pages and index.html go (default {FOLDER_OUT}/)")
    check.add_argument("--probe", metavar="DSN",
                       help="test each cause on a live PostgreSQL, read-only (a connection string; "
                            "a password file or PGPASSWORD keeps the password off the command line)")
    live = check.add_argument_group(
        "live review", "run the statement on a live database and review its plan.\n"
        "Caution: EXPLAIN ANALYZE really runs the statement; run it on a replica or a copy.\n"
        "It runs in a transaction that is always rolled back, read-only unless --allow-writes.")
    live.add_argument("--dsn", metavar="URL",
                      help=f"PostgreSQL connection string or duckdb:///path (default: ${DSN_VARIABLE}); "
                           "a password file or PGPASSWORD keeps the password off the command line")
    live.add_argument("--sql", help="the statement to review")
    live.add_argument("--sql-file", metavar="FILE", help="read the statement from this file")
    live.add_argument("--params", metavar="JSON",
                      help="the statement's parameters: a JSON list for %%s, an object for %%(name)s")
    live.add_argument("--prove", action="store_true",
                      help="try each origin's fix in a transaction that is rolled back and plan again "
                           "(plain EXPLAIN); the fix takes locks while it runs")
    live.add_argument("--statement-timeout", metavar="MS", type=int, default=60_000,
                      help="stop the statement after this many ms (default 60000)")
    live.add_argument("--lock-timeout", metavar="MS", type=int, default=2_000,
                      help="stop a wait for a lock after this many ms (default 2000)")
    live.add_argument("--allow-writes", action="store_true",
                      help="run INSERT, UPDATE, DELETE, MERGE too (rolled back; a sequence they advance "
                           "stays advanced)")
    demo = sub.add_parser("demo", help="review every bundled plan (no server needed)")
    demo.add_argument("--out", default="planview-demo", help="folder for the HTML and Markdown")
    demo.add_argument("--plans", help="folder of plans (default: the bundled plans/)")
    from .fleet.commands import add_commands

    add_commands(sub)  # batch, compare, gate
    return parser


def main(argv: list[str] | None = None) -> int:
    for stream in (sys.stdout, sys.stderr):  # a character the terminal cannot encode is escaped
        if hasattr(stream, "reconfigure"):
            stream.reconfigure(errors="backslashreplace")
    argv = sys.argv[1:] if argv is None else list(argv)
    secrets = _probe_arguments(argv)
    args = _parser(secrets).parse_args(argv)
    args.secrets = secrets
    try:
        if args.command == "check":
            return _check(args)
        from .fleet.commands import COMMANDS, run

        if args.command in COMMANDS:
            return run(args)
        return _demo(args)
    except PlanviewError as exc:
        print(f"planview: {redact(str(exc), *secrets)}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        return 130
    except BrokenPipeError:
        return 0
    except Exception as exc:  # a bug: one line by default, the traceback on request, never a password
        if os.environ.get("PLANVIEW_DEBUG"):
            sys.stderr.write(redact(traceback.format_exc(), *secrets))
        line = f"planview: internal error ({type(exc).__name__}: {exc}); please report it, " \
               "with PLANVIEW_DEBUG=1 set for the traceback"
        sys.stderr.write(redact(" ".join(line.split()), *secrets) + "\n")
        return 3


def _check(args) -> int:
    from . import engines
    from .plan import load

    if args.engine and args.fmt and args.fmt not in engines.get(args.engine).FORMATS:
        raise PlanviewError(f"--format {args.fmt} is not a {args.engine} format; valid values with "
                            f"--engine {args.engine}: {', '.join(engines.get(args.engine).FORMATS)}")

    session = None
    try:
        if _live_wanted(args):
            session, plan = _live_review(args)
        else:
            if args.prove:
                raise PlanviewError("--prove needs a live review: give --dsn (or PLANVIEW_DSN) and --sql")
            if not args.path:
                raise PlanviewError("give a plan file (or - for standard input), or --dsn and --sql for "
                                    "a live review")
            if str(args.path) != "-" and Path(args.path).is_dir():
                return _check_folder(args)
            if getattr(args, "out", None):
                raise PlanviewError("--out is for a folder of plans; for one plan use --html OUT or --markdown OUT")
            plan = load(Path(args.path), engine=args.engine, fmt=args.fmt, threshold=args.threshold)
        return _report(args, plan, session)
    finally:
        if session is not None:
            session.close()


def _live_wanted(args) -> bool:
    live_options = (args.sql, args.sql_file, args.params, args.allow_writes)
    if args.dsn or (any(live_options) and os.environ.get(DSN_VARIABLE)):
        return True
    if any(live_options):
        raise PlanviewError(f"--sql, --sql-file, --params and --allow-writes need --dsn (or {DSN_VARIABLE})")
    return False


def _live_review(args):
    import json

    from .live import connect

    if args.path:
        raise PlanviewError("give a plan file or --dsn, not both")
    if bool(args.sql) == bool(args.sql_file):
        raise PlanviewError("a live review needs the statement: --sql TEXT or --sql-file FILE (one of them)")
    if args.sql_file:
        try:
            sql = Path(args.sql_file).read_text(encoding="utf-8", errors="replace")[:1_000_000]
        except OSError as exc:
            raise PlanviewError(f"--sql-file: cannot read {args.sql_file}: {exc.strerror}") from None
    else:
        sql = args.sql
    params = None
    if args.params:
        try:
            params = json.loads(args.params)
        except ValueError as exc:
            raise PlanviewError(f"--params: not JSON ({exc.msg} at character {exc.pos})") from None
        if not isinstance(params, (list, dict)):
            raise PlanviewError("--params: give a JSON list (for %s) or object (for %(name)s)")
        params = tuple(params) if isinstance(params, list) else params
    for option, value in (("--statement-timeout", args.statement_timeout), ("--lock-timeout", args.lock_timeout)):
        if value < 1:
            raise PlanviewError(f"{option}: give a number of milliseconds of at least 1, got {value}")
    session = connect(args.dsn or os.environ[DSN_VARIABLE], statement_timeout_ms=args.statement_timeout,
                      lock_timeout_ms=args.lock_timeout, allow_writes=args.allow_writes)
    try:
        plan = session.review(sql, params, threshold=args.threshold)
    except BaseException:
        session.close()
        raise
    return session, plan


def _prove_all(args, plan, session) -> list[str]:
    """Each origin's fix tried and rolled back (before the report is written, so the JSON holds
    the proofs); what each will do and lock is said first, on stderr with --json. The proof's
    words are the report's (`planview.words`); a proof that could not run says why."""
    secrets = tuple(getattr(args, "secrets", ())) + ((args.dsn,) if args.dsn else ())
    ahead = sys.stderr if args.json else sys.stdout
    failures: dict[int, str] = {}
    for finding in plan.findings:
        if finding.fix:
            ahead.write(redact(f"proof #{finding.node}: trying {' '.join(finding.fix.split())[:200]}"
                               + (f" ({finding.caution})" if finding.caution else ""), *secrets) + "\n")
            ahead.flush()
        try:
            session.prove(finding, plan)
        except PlanviewError as exc:
            failures[finding.node] = str(exc)
    said = {record["node"]: record["text"].get("proof") for record in plan.report()["findings"]}
    lines = []
    for finding in plan.findings:
        if finding.node in failures:
            line = f"proof #{finding.node}: not proven: {failures[finding.node]}"
        elif said.get(finding.node):
            line = f"proof #{finding.node}: {said[finding.node]}"
        elif finding.proof is not None:
            line = (f"proof #{finding.node}: tried in a transaction that was rolled back; the figures "
                    "are the JSON report's proof")
        else:
            line = f"proof #{finding.node}: not proven"
        lines.append(redact(line, *secrets))
    return lines


def _report(args, plan, session) -> int:
    proofs = _prove_all(args, plan, session) if args.prove else []
    if getattr(args, "query", None):
        try:
            query = Path(args.query).read_text(encoding="utf-8", errors="replace")[:1_000_000]
        except OSError as exc:
            raise PlanviewError(f"--query: cannot read {args.query}: {exc.strerror}") from None
        plan.set_query_text(query)
    if args.json:
        sys.stdout.write(plan.to_json() + "\n")
    else:
        sys.stdout.write(plan.to_text(width=args.width, color=sys.stdout.isatty()))
    for line in proofs:
        (sys.stderr if args.json else sys.stdout).write(line + "\n")
    if args.probe:
        from .probe import probe

        for result in probe(plan, args.probe):
            line = f"probe #{result.node} {result.cause}: {result.verdict}: {result.summary}"
            sys.stdout.write(redact(line, args.probe) + "\n")
            for item in result.checks:
                sys.stdout.write(f"   {redact(item.says, args.probe)}\n")
    if args.html:
        plan.to_html(args.html)
    if args.markdown:
        plan.to_markdown(args.markdown)
    worst = max((f.own_q_error for f in plan.findings), default=1.0)
    return 1 if plan.findings and worst >= args.fail_at else 0


def bundled_plans_dir() -> Path:
    here = Path(__file__).resolve().parent
    for candidate in (here.parent / "plans", here / "plans"):
        if candidate.is_dir():
            return candidate
    raise PlanviewError("the bundled plans/ folder was not found; pass --plans")


def _check_folder(args) -> int:
    """Every plan in a folder: a review page each, one terminal line each, and the index page.
    Exit 1 when any plan has an origin at --fail-at or worse; an unreadable file is listed."""
    for option, name in ((args.html, "--html"), (args.markdown, "--markdown"), (args.query, "--query"),
                         (args.probe, "--probe")):
        if option:
            raise PlanviewError(f"{name} is for one plan, not a folder; a folder's pages go to --out DIR")
    out = Path(args.out or FOLDER_OUT)
    rows, unreadable, skipped = review_folder(
        Path(args.path), out, threshold=args.threshold, engine=args.engine, fmt=args.fmt,
        fail_at=args.fail_at, title=f"planview reviews of {args.path}", quiet=args.json)
    if not rows and not unreadable:
        raise PlanviewError(f"no plan file in {args.path} (plan files end in "
                            f"{', '.join(_plan_suffixes())}; {len(skipped)} other file(s) skipped)")
    if args.json:
        import json

        sys.stdout.write(json.dumps({
            "plans": [{"file": r.file, "review": r.link, "text": r.text, "values": r.key} for r in rows],
            "unreadable": [{"file": u.file, "reason": u.reason} for u in unreadable],
            "skipped": [str(p.relative_to(args.path)) for p in skipped],
            "index": str(out / "index.html"),
        }, indent=2, ensure_ascii=False) + "\n")
    failing = [r for r in rows if r.key["origins"] and r.worst_q_error >= args.fail_at]
    return 1 if failing else 0


def _plan_suffixes() -> tuple[str, ...]:
    from .source import PLAN_SUFFIXES

    return PLAN_SUFFIXES


def _page_stem(relative: str, used: set[str]) -> str:
    """A review page's name from the plan's path in the folder: one file name, not too long
    for a file system, unique even where case is ignored."""
    import hashlib

    stem = relative.replace("/", "__")
    if len(stem.encode("utf-8")) > 150:
        digest = hashlib.sha256(relative.encode("utf-8", "surrogatepass")).hexdigest()[:12]
        stem = stem.encode("utf-8")[:100].decode("utf-8", "ignore") + "-" + digest
    base, number = stem, 1
    while stem.lower() in used or stem.lower() == "index":
        number += 1
        stem = f"{base}-{number}"
    used.add(stem.lower())
    return stem


def review_folder(root: Path, out: Path, *, threshold: float = 10.0, engine: str | None = None,
                  fmt: str | None = None, fail_at: float | None = None, title: str = "planview reviews",
                  quiet: bool = False):
    """Review every plan under `root` into `out` (a page and a ticket each, and index.html).
    Returns the index rows, the unreadable files and the files skipped as not plans."""
    from .errors import PlanParseError
    from .export.index_page import Unreadable, index_row, render_index, summary_line
    from .inert import visible
    from .plan import load
    from .source import plan_files
    from .words import plural

    say = (lambda line: None) if quiet else (lambda line: sys.stdout.write(visible(line) + "\n"))
    if not root.is_dir():
        raise PlanviewError(f"{root}: no such folder")
    if not threshold > 1:  # refused once, not once a file
        raise PlanviewError(f"--threshold must be a q-error above 1, got {threshold:g}")
    files, skipped = plan_files(root)
    out.mkdir(parents=True, exist_ok=True)
    inside = out.resolve()
    files = [p for p in files if not p.resolve().is_relative_to(inside)]  # not our own pages
    skipped = [p for p in skipped if not p.resolve().is_relative_to(inside)]
    rows, unreadable, used = [], [], set()
    for path in files:
        rel = path.relative_to(root).as_posix()
        try:
            plan = load(path, engine=engine, fmt=fmt, threshold=threshold)
        except PlanParseError as exc:
            reason = " ".join(str(exc).split())
            unreadable.append(Unreadable(rel, reason))
            say(f"{rel}: unreadable: {reason}")
            continue
        stem = _page_stem(rel, used)
        link = None
        try:
            plan.to_html(out / f"{stem}.html")
            plan.to_markdown(out / f"{stem}.md")
            link = f"{stem}.html"
        except ImportError:
            pass
        row = index_row(plan.report(), rel, link)
        rows.append(row)
        say(summary_line(row))
    index = out / "index.html"
    index.write_text(render_index(rows, title=title, unreadable=unreadable, skipped=len(skipped),
                                  fail_at=fail_at), encoding="utf-8")
    origins = sum(r.key["origins"] for r in rows)
    say(f"reviewed {plural(len(rows), 'plan')}, {plural(origins, 'origin')}"
        + (f"; {len(unreadable)} unreadable" if unreadable else "")
        + (f"; {plural(len(skipped), 'file')} skipped as not plans" if skipped else "")
        + f"; index: {index}")
    return rows, unreadable, skipped


def _demo(args) -> int:
    root = Path(args.plans) if args.plans else bundled_plans_dir()
    review_folder(root, Path(args.out), title="planview demo: the bundled plans", fail_at=10.0)
    return 0


if __name__ == "__main__":
    sys.exit(main())
