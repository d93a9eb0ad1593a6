"""A fixed guess of the planner's where nothing can be known: a recursive CTE.

The planner cannot know how many times a recursive term will run. The engine's
`RECURSIVE_GUESSES` say what it assumes instead (PostgreSQL: about 10 iterations, and a work
table of 10 times the non-recursive term); the real count of iterations is the recursive
term's loops.

>>> iterations_assumed(estimated=31, non_recursive=1, per_iteration=3)
10.0
"""

from __future__ import annotations

from .context import Candidate, Context, fmt_rows


def iterations_assumed(estimated: float, non_recursive: float, per_iteration: float) -> float:
    return (estimated - non_recursive) / per_iteration if per_iteration else 0.0


def rule(ctx: Context) -> Candidate | None:
    node = ctx.node
    guess = ctx.engine.RECURSIVE_GUESSES.get(node.operator)
    if guess is None:
        return None
    factor, what = guess
    lines = [f"{node.label} is estimated by a fixed guess: {what}; no statistic can change it."]
    fields: dict = {"guess_factor": factor, "guess": what}
    nodes = ctx.plan.nodes
    inputs = [nodes[c] for c in node.children if nodes[c].is_input_edge]
    if len(inputs) == 2 and inputs[1].starts:
        iterations = inputs[1].starts
        fields["iterations"] = iterations
        lines.append(f"The recursive term ran {iterations:,.0f} times (its loops), not "
                     f"{factor:,.0f}: {fmt_rows(ctx.actual_total)} rows in all, not "
                     f"{fmt_rows(ctx.est_total)}.")
    elif node.starts and node.starts > 1:
        fields["iterations"] = node.starts
        lines.append(f"It ran {node.starts:,.0f} times (once per iteration of the recursion).")
    return Candidate(cause="planner_guess", score=0.85,
                     reason="a recursive CTE's size is a fixed guess of the planner's",
                     lines=lines, fields=fields, table=None, columns=[])
