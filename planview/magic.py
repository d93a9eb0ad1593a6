"""IPython integration: ``%load_ext planview`` registers ``%%planview`` (a pasted plan
becomes a review) and ``%planview PATH`` (a plan file becomes one).

``%%planview --dsn URL|VAR|ENVVAR`` reviews the SQL in the cell on a live database instead
(`planview.live`): the DSN as written, a notebook variable holding a connection string, a
connection or a `planview.live.Session`, or an environment variable holding the string (which
keeps a password out of the notebook and its history). Caution: EXPLAIN ANALYZE really runs the statement; run it on a replica or a copy.

Unreadable input prints the one-line `PlanParseError` message; it never raises into the
notebook. IPython and the widget libraries are imported only when used, so ``import
planview`` stays light for the command line.
"""

from __future__ import annotations

from .errors import PlanviewError


def review(source, *, engine: str | None = None, fmt: str | None = None, threshold: float = 10.0,
           charts: bool = True, errors: str = "show", query: str | None = None):
    """The review of a plan given as text, a path or a `Plan`: a `PlanWidget` (``w.selected``
    is the selected node). Unreadable input gives a `ReviewError` that shows its one-line
    message (``errors="raise"`` raises `planview.PlanParseError` instead)."""
    from .widget import review as _review

    return _review(source, engine=engine, fmt=fmt, threshold=threshold, charts=charts, errors=errors,
                   query=query)


def _magics_class():
    from IPython.core.magic import Magics, line_cell_magic, magics_class
    from IPython.core.magic_arguments import argument, magic_arguments, parse_argstring

    @magics_class
    class PlanviewMagics(Magics):
        @magic_arguments()
        @argument("path", nargs="?", help="a plan file (line form only); the cell form reviews the cell's text")
        @argument("--engine", "-e", help="force the engine (default: detected)")
        @argument("--format", "-f", dest="fmt", help="force the format: text, json, xml, yaml... (default: detected)")
        @argument("--threshold", "-t", type=float, default=10.0,
                  help="own q-error that makes a node an origin (default 10)")
        @argument("--name", "-n", help="also keep the review in this variable (to read .selected later)")
        @argument("--no-charts", action="store_true", help="the tree and detail only, no plotly charts")
        @argument("--query", "-q", help="the statement's SQL: a variable holding it, or a .sql file")
        @argument("--dsn", help="review the cell's SQL on a live database: a connection string, a "
                                "variable holding one (or a connection, or a planview Session), or an "
                                "environment variable. EXPLAIN ANALYZE really runs it: use a replica or a copy")
        @argument("--params", help="a variable holding the statement's parameters (with --dsn)")
        @argument("--allow-writes", action="store_true",
                  help="with --dsn: run INSERT, UPDATE, DELETE, MERGE too (rolled back)")
        @argument("--statement-timeout", type=int, default=60_000, help="with --dsn: ms (default 60000)")
        @argument("--lock-timeout", type=int, default=2_000, help="with --dsn: ms (default 2000)")
        @line_cell_magic
        def planview(self, line: str = "", cell: str | None = None):
            """Review a query plan: %%planview [--engine E] [--format F] [--threshold T] [--name VAR]"""
            from .widget import ReviewError

            args = parse_argstring(self.planview, line)
            if cell is None:
                if not args.path:
                    print("planview: give a plan file (%planview PATH) or paste a plan under %%planview")
                    return None
                source = args.path
            else:
                if args.path:
                    print("planview: %%planview reviews the cell's text; put a file path on a "
                          "%planview line instead")
                    return None
                source = cell
            if args.name and not args.name.isidentifier():
                print(f"planview: --name {args.name!r} is not a Python name")
                return None
            query = None
            if args.query:
                held = self.shell.user_ns.get(args.query) if args.query.isidentifier() else None
                if isinstance(held, str):
                    query = held
                else:
                    try:
                        with open(args.query, encoding="utf-8", errors="replace") as handle:
                            query = handle.read(1_000_000)
                    except OSError:
                        print(f"planview: --query {args.query!r} is neither a variable holding text nor a "
                              "readable file")
                        return None
            try:
                if args.dsn:
                    if cell is None:
                        print("planview: --dsn reviews the SQL in the cell: put it under %%planview --dsn ...")
                        return None
                    source = self._live_plan(args, cell)
                    if source is None:
                        return None
                result = review(source, engine=args.engine, fmt=args.fmt, threshold=args.threshold,
                                charts=not args.no_charts, errors="raise", query=query)
            except PlanviewError as exc:
                print(ReviewError(exc))
                return None
            if args.name:
                self.shell.user_ns[args.name] = result
            return result

        def _live_plan(self, args, sql: str):
            """The cell's statement reviewed live; a one-line message (no password) if it cannot be."""
            import os

            from .live import Session, connect
            from .redact import redact

            target = args.dsn
            held = self.shell.user_ns.get(target) if target.isidentifier() else None
            if held is None and target.isidentifier() and os.environ.get(target):
                held = os.environ[target]
            if held is None and target.isidentifier():
                print(f"planview: --dsn {target}: no notebook variable or environment variable of that name")
                return None
            target = held if held is not None else target
            params = None
            if args.params:
                if args.params not in self.shell.user_ns:
                    print(f"planview: --params {args.params!r} is not a notebook variable")
                    return None
                params = self.shell.user_ns[args.params]
            print("planview: caution: EXPLAIN ANALYZE really runs the statement; run it on a replica or a "
                  "copy (planview rolls it back, read-only unless --allow-writes)")
            dsn = target if isinstance(target, str) else None
            try:
                if isinstance(target, Session):
                    return target.review(sql, params, threshold=args.threshold)
                # the session stays open with its plan, for the review's "try the fix" button;
                # it closes when the plan is gone (or session.close())
                session = connect(target, statement_timeout_ms=args.statement_timeout,
                                  lock_timeout_ms=args.lock_timeout, allow_writes=args.allow_writes)
                try:
                    return session.review(sql, params, threshold=args.threshold)
                except BaseException:
                    session.close()
                    raise
            except PlanviewError as exc:
                failure = redact(str(exc), dsn)
            print(f"planview: {failure}")
            return None

    return PlanviewMagics


def plan_mimebundle(plan) -> dict:
    """A `Plan` shown as a cell's value: the interactive review, with the static tree for
    front ends without widgets (and as the whole answer where the widget libraries fail)."""
    data = {"text/plain": repr(plan), "text/html": plan._repr_html_()}
    try:
        from .widget import PlanWidget
    except ImportError:
        return data
    bundle = PlanWidget(plan)._repr_mimebundle_()
    data.update(bundle[0] if isinstance(bundle, tuple) else bundle)
    return data


def comparison_mimebundle(comparison) -> dict:
    """A `Comparison` shown as a cell's value: its table over the two plans' own reviews,
    with the static table for front ends without widgets."""
    data = {"text/plain": comparison.headline(), "text/html": comparison._repr_html_()}
    try:
        from .widget.compare_view import ComparisonWidget
    except ImportError:
        return data
    bundle = ComparisonWidget(comparison)._repr_mimebundle_()
    data.update(bundle[0] if isinstance(bundle, tuple) else bundle)
    return data


def load_ipython_extension(ipython) -> None:
    """``%load_ext planview``: the magics, and a `Plan` as a cell's value becomes its review.

    The display hook lives here, not on `Plan`, so the core never imports the notebook layer."""
    from .plan import Plan

    ipython.register_magics(_magics_class())
    ipython.display_formatter.mimebundle_formatter.for_type(Plan, plan_mimebundle)
    from .fleet.compare import Comparison

    ipython.display_formatter.mimebundle_formatter.for_type(Comparison, comparison_mimebundle)
