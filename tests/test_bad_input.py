"""Bad input: a clear PlanParseError naming the line or key, exit 2, never a traceback or a hang.

The inputs are real PG 16 captures (plans/postgresql/pg16) damaged in known ways, plus the
classic XML entity attacks (the "billion laughs" entity expansion and an external entity
reading a local file), which the parser must refuse without expanding.
"""

from __future__ import annotations

import json
import subprocess
import sys
import time

import pytest
from plan_files import path

import planview
from planview import PlanParseError
from planview import source as source_module

REAL_JSON = path("16", "correlated", "json").read_text()
REAL_TEXT = path("16", "nested_loop_inherited", "text").read_text()
REAL_XML = path("16", "correlated", "xml").read_text()
REAL_YAML = path("16", "correlated", "yaml").read_text()


def run_cli(*args, stdin: str | None = None):
    return subprocess.run([sys.executable, "-m", "planview.cli", *args], input=stdin,
                          capture_output=True, text=True, timeout=120)


def test_truncated_json_names_the_line():
    cut = REAL_JSON[: len(REAL_JSON) // 2]
    with pytest.raises(PlanParseError) as err:
        planview.load(cut, engine="postgresql", fmt="json")
    assert err.value.line is not None and err.value.line > 1
    assert "JSON" in str(err.value)


def test_wrong_value_type_names_the_key():
    doc = json.loads(REAL_JSON)
    doc[0]["Plan"]["Plans"][0]["Plan Rows"] = "many"
    with pytest.raises(PlanParseError) as err:
        planview.load(json.dumps(doc))
    assert err.value.key == '[0].Plan.Plans[0]."Plan Rows"'
    assert "'many'" in str(err.value)


def test_negative_count_names_the_key():
    doc = json.loads(REAL_JSON)
    doc[0]["Plan"]["Actual Loops"] = -3
    with pytest.raises(PlanParseError) as err:
        planview.load(json.dumps(doc))
    assert "Actual Loops" in err.value.key and "negative" in err.value.message


def test_negative_count_in_text_names_the_line():
    bad = REAL_TEXT.replace("rows=", "rows=-", 1)
    with pytest.raises(PlanParseError) as err:
        planview.load(bad, engine="postgresql", fmt="text")
    assert err.value.line == 1


def test_number_with_two_decimal_points_names_the_line():
    """Found by review: '1.2.3' matched a loose number pattern and float() raised ValueError."""
    bad = REAL_TEXT.replace("rows=", "rows=1.2.", 1)
    with pytest.raises(PlanParseError) as err:
        planview.load(bad, engine="postgresql", fmt="text")
    assert err.value.line == 1 and "figures" in err.value.message
    worker = "Seq Scan on t  (cost=0.00..1.00 rows=1 width=4)\n  Worker 0:  actual time=0.1..0.2 rows=1.2.3 loops=1"
    planview.load(worker)  # the worker line is kept as text, not misread


def test_garbage_text():
    with pytest.raises(PlanParseError) as err:
        planview.load("hello\nthis is not a plan\n")
    assert err.value.line == 1


def test_text_child_before_root():
    with pytest.raises(PlanParseError) as err:
        planview.load("  ->  Seq Scan on t  (cost=0.00..1.00 rows=1 width=4)\n", engine="postgresql", fmt="text")
    assert err.value.line == 1


def test_missing_node_type():
    doc = json.loads(REAL_JSON)
    del doc[0]["Plan"]["Node Type"]
    with pytest.raises(PlanParseError) as err:
        planview.load(json.dumps(doc), engine="postgresql", fmt="json")
    assert "Node Type" in err.value.key


BILLION_LAUGHS = """<?xml version="1.0"?>
<!DOCTYPE lolz [<!ENTITY lol "lol"><!ENTITY lol2 "&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;">
<!ENTITY lol3 "&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;">
<!ENTITY lol9 "&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;">]>
<explain xmlns="http://www.postgresql.org/2009/explain"><Query><Plan><Node-Type>&lol9;</Node-Type>
<Plan-Rows>1</Plan-Rows></Plan></Query></explain>"""

EXTERNAL_ENTITY = """<?xml version="1.0"?>
<!DOCTYPE x [<!ENTITY secret SYSTEM "file:///etc/passwd">]>
<explain xmlns="http://www.postgresql.org/2009/explain"><Query><Plan><Node-Type>&secret;</Node-Type>
<Plan-Rows>1</Plan-Rows></Plan></Query></explain>"""


@pytest.mark.parametrize("doc", [BILLION_LAUGHS, EXTERNAL_ENTITY], ids=["entity-bomb", "external-entity"])
def test_xml_entities_are_refused_not_expanded(doc):
    start = time.perf_counter()
    with pytest.raises(PlanParseError) as err:
        planview.load(doc)
    assert time.perf_counter() - start < 5
    assert "DOCTYPE" in str(err.value) and err.value.line == 2
    assert "root:" not in str(err.value)


def test_yaml_uses_a_safe_loader():
    evil = REAL_YAML.replace('Node Type: "Bitmap Heap Scan"',
                             'Node Type: !!python/object/apply:os.system ["echo pwned"]', 1)
    with pytest.raises(PlanParseError) as err:
        planview.load(evil, engine="postgresql", fmt="yaml")
    assert "YAML" in str(err.value)


def deep_text(levels: int) -> str:
    lines = ["Limit  (cost=0.00..1.00 rows=1 width=4) (actual time=0.1..0.1 rows=1 loops=1)"]
    for depth in range(1, levels):
        pad = "  " + "      " * (depth - 1)
        lines.append(f"{pad}->  Limit  (cost=0.00..1.00 rows=1 width=4) (actual time=0.1..0.1 rows=1 loops=1)")
    return "\n".join(lines)


def deep_json(levels: int) -> str:
    node = {"Node Type": "Result", "Plan Rows": 1, "Actual Rows": 1, "Actual Loops": 1}
    for _ in range(levels - 1):
        node = {"Node Type": "Limit", "Plan Rows": 1, "Actual Rows": 1, "Actual Loops": 1, "Plans": [node]}
    # build the text without json.dumps' recursion
    return json.dumps([{"Plan": node}]) if levels < 400 else _deep_json_text(levels)


def _deep_json_text(levels: int) -> str:
    head = '{"Node Type": "Limit", "Plan Rows": 1, "Actual Rows": 1, "Actual Loops": 1, "Plans": ['
    leaf = '{"Node Type": "Result", "Plan Rows": 1, "Actual Rows": 1, "Actual Loops": 1}'
    return '[{"Plan": ' + head * (levels - 1) + leaf + "]}" * (levels - 1) + "}]"


@pytest.mark.parametrize("make", [deep_text, _deep_json_text], ids=["text", "json"])
def test_three_thousand_levels_read_or_refused_cleanly(make):
    text = make(3000)
    try:
        plan = planview.load(text)
    except PlanParseError as err:
        assert "deep" in str(err)
    else:
        assert len(plan.nodes) == 3000 and max(n.depth for n in plan.nodes) == 2999


def test_moderately_deep_plan_is_read():
    plan = planview.load(deep_text(1500))
    assert len(plan.nodes) == 1500 and plan.nodes[-1].depth == 1499


def test_size_limit(monkeypatch, tmp_path):
    monkeypatch.setattr(source_module, "MAX_INPUT_BYTES", 1000)
    big = tmp_path / "big.json"
    big.write_text(REAL_JSON * 10)
    with pytest.raises(PlanParseError) as err:
        source_module.read_text(big, max_bytes=source_module.MAX_INPUT_BYTES)
    assert "limit" in str(err.value)
    with pytest.raises(PlanParseError):
        source_module.read_text("x" * 2000, max_bytes=1000)


def test_cli_exit_codes_and_no_traceback(tmp_path):
    bad = tmp_path / "bad.json"
    bad.write_text(REAL_JSON[:300])
    result = run_cli("check", str(bad))
    assert result.returncode == 2
    assert result.stderr.count("\n") == 1 and "Traceback" not in result.stderr
    assert "line" in result.stderr
    # a real plan with a planted 30x underestimate: an origin at q >= 10 -> exit 1
    assert run_cli("check", str(path("16", "correlated", "json"))).returncode == 1
    # the same plan with the gate above its q-error -> exit 0
    assert run_cli("check", str(path("16", "correlated", "json")), "--fail-at", "1000").returncode == 0
    # a real plan whose estimates are all within 10x -> exit 0
    assert run_cli("check", str(path("16", "well_estimated", "text"))).returncode == 0
    # standard input
    result = run_cli("check", "-", "--json", stdin=path("16", "skewed", "text").read_text())
    assert result.returncode == 1 and json.loads(result.stdout)["engine"] == "postgresql"
    assert run_cli("check", str(tmp_path / "missing.txt")).returncode == 2
