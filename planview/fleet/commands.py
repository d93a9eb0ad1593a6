"""The many-plan commands: ``planview batch``, ``planview compare`` and ``planview gate``.

Kept out of cli.py so that module only registers them. Exit codes follow ``check``: 0 nothing at
or above the bar, 1 at least one, 2 unusable arguments or input as a whole (an unreadable
entry in a batch is reported and counted, never a 2), 3 a bug.
"""

from __future__ import annotations

import sys

COMMANDS = ("batch", "compare", "gate")


def add_commands(sub) -> None:
    batch = sub.add_parser("batch", help="review every plan in a server log (auto_explain) or a folder")
    batch.add_argument("path", help="a PostgreSQL server log, a plan file, or a folder of either")
    batch.add_argument("--out", help="write the table: a .parquet or .csv file (one row a node, one a query)")
    batch.add_argument("--summary", metavar="OUT", help="also write the summary page: .html or .md")
    batch.add_argument("--workers", type=int, help="processes (default: one a core)")
    batch.add_argument("--threshold", type=float, default=10.0,
                       help="own q-error that makes a node an origin (default 10)")
    batch.add_argument("--fail-at", type=float, default=10.0,
                       help="exit 1 when an origin's q-error is at least this (default 10)")
    batch.add_argument("--dask", metavar="SCHEDULER",
                       help="run on a Dask cluster (a scheduler address, or 'local' for one on this "
                            "machine); --out is then a folder of Parquet partitions")
    batch.add_argument("--no-progress", action="store_true", help="no progress bar")

    compare = sub.add_parser("compare", help="compare two plans of the same query (before and after)")
    compare.add_argument("before", help="the earlier plan file")
    compare.add_argument("after", help="the later plan file")
    compare.add_argument("--threshold", type=float, default=10.0)
    compare.add_argument("--markdown", metavar="OUT", help="also write the comparison as Markdown")
    compare.add_argument("--html", metavar="OUT", help="also write the comparison as an HTML page")
    compare.add_argument("--json", action="store_true", help="print the comparison as JSON")

    gate = sub.add_parser("gate", help="fail only on an origin that is new or worse than the baseline")
    gate.add_argument("plans", help="a plan file, a folder of plans, or a server log")
    gate.add_argument("--baseline", required=True, help="the baseline file (JSON)")
    gate.add_argument("--update-baseline", action="store_true",
                      help="write the baseline from these plans and exit 0")
    gate.add_argument("--threshold", type=float, default=10.0)
    gate.add_argument("--worse-by", type=float, default=2.0,
                      help="how many times larger an origin's q-error must grow to count as worse "
                           "(default 2)")


def run(args) -> int:
    if args.command == "batch":
        return _batch(args)
    if args.command == "compare":
        return _compare(args)
    return _gate(args)


def _say_unreadable(item) -> None:
    from ..inert import visible

    print(f"planview: {visible(str(item))}", file=sys.stderr)


def _batch(args) -> int:
    from ..errors import PlanviewError
    from .batch import write_batch

    if args.dask:
        from .dask_run import dask_batch

        if not args.out:
            raise PlanviewError("--dask needs --out (a folder for the Parquet partitions)")
        totals = dask_batch(args.path, args.out, scheduler=args.dask, threshold=args.threshold)
        for item in totals.unreadable:
            _say_unreadable(item)
    else:
        keeper = None
        if args.summary:
            from .summary import SummaryBuilder

            keeper = SummaryBuilder()
        out = args.out
        if out is None:
            import tempfile

            out = tempfile.mktemp(suffix=".parquet", prefix="planview-batch-")
        try:
            totals = write_batch(args.path, out, workers=args.workers, threshold=args.threshold,
                                 progress=None if not args.no_progress else False,
                                 on_unreadable=_say_unreadable, keep=keeper.add if keeper else None)
        finally:
            if args.out is None:
                import os

                if os.path.exists(out):
                    os.remove(out)
        if keeper is not None:
            keeper.write(args.summary)
    print(f"reviewed {totals.entries:,} entries: {totals.queries:,} plans, {totals.nodes:,} operators, "
          f"{totals.origins:,} origins, {len(totals.unreadable):,} unreadable"
          + (f"; table in {args.out}" if args.out else ""))
    return 1 if totals.origins and totals.worst_q_error >= args.fail_at else 0


def _compare(args) -> int:
    from .compare import compare

    result = compare(args.before, args.after, threshold=args.threshold)
    if args.json:
        import json

        sys.stdout.write(json.dumps(result.report(), indent=2, ensure_ascii=False) + "\n")
    else:
        sys.stdout.write(result.to_text())
    if args.markdown:
        result.to_markdown(args.markdown)
    if args.html:
        result.to_html(args.html)
    return 0


def _gate(args) -> int:
    from .gate import gate, update_baseline

    if args.update_baseline:
        baseline = update_baseline(args.plans, args.baseline, threshold=args.threshold,
                                   on_unreadable=_say_unreadable)
        print(f"baseline written to {args.baseline}: {len(baseline['origins'])} origin(s) "
              f"in {baseline['plans']} plan(s)")
        return 0
    verdict = gate(args.plans, args.baseline, threshold=args.threshold, worse_by=args.worse_by,
                   on_unreadable=_say_unreadable)
    sys.stdout.write(verdict.to_text())
    return 1 if verdict.failed else 0
