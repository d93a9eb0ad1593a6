"""PostgreSQL's four formats (and psql's decorated display) give one tree and the same numbers.

Source of every input: real EXPLAIN output of real PostgreSQL 15 (Debian) and 16 (the
pgserver wheel), captured by plans/capture_postgresql.py, or produced live in the test.
"""

from __future__ import annotations

import pytest
from plan_files import all_case_ids, cases, path

import planview

# Fields that must agree across formats. Timings and buffer counts differ between runs
# (each format is a separate execution), so they are left out, as the issue allows.
CORE = ("id", "parent", "children", "statement", "depth", "operator", "label", "relation",
        "alias", "schema", "index", "function_name", "cte_name", "subplan_name",
        "parent_relationship", "join_type", "strategy", "partial_mode", "parallel_aware",
        "operation", "conditions", "est_rows", "starts", "est_total", "executed")
ACTUALS = ("actual_rows", "actual_total", "rows_removed")


def core(plan, with_actuals=True):
    fields = CORE + (ACTUALS if with_actuals else ())
    return [{k: n[k] for k in fields} for n in plan.report()["nodes"]]


def run_variable(plan) -> set[int]:
    """Nodes whose actual rows legitimately vary between two executions: those cut short
    (their count depends on when the consumer stopped), and a Gather with all below it (how
    many workers start, and how rows split between processes, varies with load: with no
    worker launched a Gather over partial aggregates returns a third of the rows)."""
    out = set()
    for node in plan.nodes:
        parent = plan.nodes[node.parent] if node.parent is not None else None
        if (node.not_judged_reason or "").startswith(("stopped early", "may have")) or \
                node.operator in ("Gather", "Gather Merge") or \
                (parent is not None and parent.id in out):
            out.add(node.id)
    return out


def assert_same(plan, reference, what):
    """Same tree and estimates everywhere; same actuals except where runs may differ."""
    variable = run_variable(reference)
    got = plan.report()["nodes"]
    want = reference.report()["nodes"]
    assert len(got) == len(want), what
    per_run = ("starts", "est_total", "executed")  # how many processes ran varies with load
    for a, b in zip(got, want):
        for key in CORE:
            if b["id"] in variable and key in per_run:
                continue
            assert a[key] == b[key], (what, a["id"], key, a[key], b[key])
        if b["id"] not in variable:
            for key in ACTUALS:
                assert a[key] == b[key], (what, a["id"], key, a[key], b[key])


@pytest.mark.parametrize("version,case", all_case_ids())
def test_four_formats_one_tree(version, case):
    """Real captures: text, JSON, XML, YAML and both psql pastes read to the same tree."""
    info = cases(version)[case]
    plans = {fmt: planview.load(path(version, case, fmt)) for fmt in
             ("text", "json", "xml", "yaml", "psql_text", "psql_json")}
    assert plans["text"].format == "text" and plans["json"].format == "json"
    assert plans["xml"].format == "xml" and plans["yaml"].format == "yaml"
    # the captured data are deterministic (generate_series), so actual rows agree too, except
    # for nodes whose counts depend on the run (see run_variable)
    for fmt, plan in plans.items():
        assert_same(plan, plans["json"], f"{fmt} vs json ({version}/{case})")
    assert info["files"]["text"].endswith(".text.txt")


@pytest.mark.parametrize("version", sorted({v for v, _ in all_case_ids()}))
def test_never_executed_nodes(version):
    """Real plan with '(never executed)' in text; zeros with Actual Loops 0 in JSON."""
    for fmt in ("text", "json", "xml", "yaml"):
        plan = planview.load(path(version, "never_executed", fmt))
        never = [n for n in plan.nodes if n.executed is False]
        assert never, fmt
        for node in never:
            assert node.actual_rows is None and node.actual_total is None and node.q_error is None
            assert not node.judged and node.not_judged_reason == "never executed"


@pytest.mark.parametrize("version", sorted({v for v, _ in all_case_ids()}))
def test_estimates_only_plans(version):
    """Real EXPLAIN without ANALYZE: accepted, 'no actuals', no q-errors, no findings."""
    for fmt in ("text", "json", "xml", "yaml"):
        plan = planview.load(path(version, "estimates_only", fmt))
        assert not plan.has_actuals
        assert any("no actuals" in note for note in plan.notes)
        assert all(n.q_error is None and n.est_rows is not None for n in plan.nodes)
        assert plan.findings == []


@pytest.mark.parametrize("version", sorted({v for v, _ in all_case_ids()}))
def test_several_statements_in_one_paste(version):
    """Real multi-statement pastes: two statements, in every format and in psql's display."""
    shapes = []
    for name in ("multi.text.txt", "multi.json", "multi.array.json", "multi.xml", "multi.yaml",
                 "multi.psql.txt", "multi.psql.json.txt"):
        plan = planview.load(path(version, "multi", "text").with_name(name))
        assert len(plan.statements) == 2, name
        roots = [n.id for n in plan.nodes if n.parent is None]
        assert roots == [s.root for s in plan.statements] and roots[0] == 0
        shapes.append([(n["operator"], n["parent"], n["statement"], n["est_rows"], n["actual_rows"])
                       for n in plan.report()["nodes"]])
    assert all(shape == shapes[0] for shape in shapes)


@pytest.mark.parametrize("version", sorted({v for v, _ in all_case_ids()}))
def test_text_labels_map_to_canonical_types(version):
    """Text prints 'Parallel Seq Scan', 'Hash Semi Join', 'Insert on t'...: the JSON Node Type
    (the canonical name) is what the tree keeps, the printed label beside it."""
    seen = {}
    for case in cases(version):
        text = planview.load(path(version, case, "text"))
        js = planview.load(path(version, case, "json"))
        for a, b in zip(text.nodes, js.nodes):
            assert a.operator == b.operator
            seen[a.label.split(" on ")[0]] = a.operator
    assert seen.get("Parallel Seq Scan") == "Seq Scan"
    assert seen.get("Insert") == "ModifyTable"
    assert any(label.startswith("Hash") and "Join" in label and op == "Hash Join"
               for label, op in seen.items())


@pytest.mark.pg
def test_live_server_four_formats(scenario_db):
    """Live: run real EXPLAIN ANALYZE in the four formats on each real server and compare."""
    for case in ("correlated", "nested_loop_inherited", "join_correlated", "cte", "subplan",
                 "parallel", "semi_join", "append"):
        outputs = {fmt: scenario_db.explain_case(case, fmt) for fmt in ("text", "json", "xml", "yaml")}
        plans = {fmt: planview.load(text) for fmt, text in outputs.items()}
        for fmt, plan in plans.items():
            assert plan.format == fmt
            assert_same(plan, plans["json"], f"live {scenario_db.version} {case} {fmt}")
        psql_text = planview.load(scenario_db.psql_case(case, "text"))
        assert [n.operator for n in psql_text.nodes] == [n.operator for n in plans["text"].nodes]
