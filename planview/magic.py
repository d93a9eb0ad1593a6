"""IPython integration: ``%load_ext planview`` registers ``%%planview`` (a pasted plan
becomes a review) and ``%planview PATH`` (a plan file becomes one).

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
                result = review(source, engine=args.engine, fmt=args.fmt, threshold=args.threshold,
                                charts=not args.no_charts, errors="raise", query=query)
            except PlanviewError as exc:
                print(ReviewError(exc))
                return None
            if args.name:
                self.shell.user_ns[args.name] = result
            return result

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
