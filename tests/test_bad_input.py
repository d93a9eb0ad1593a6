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
from pathlib import Path

import pytest
from hostile_inputs import yaml_alias_bomb, yaml_merge_bomb
from plan_files import path

import planview
from planview import PlanParseError
from planview import source as source_module
from planview.plan import READER_ERROR

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


# -- hostile input that once cost unbounded time or memory, or reached the user as a traceback --

def check_cli_clean(path, expect_codes=(2,)):
    """The CLI, text and --json, on a file: the expected exit code, one line, no traceback."""
    for extra in ((), ("--json",)):
        result = subprocess.run([sys.executable, "-m", "planview.cli", "check", str(path), *extra],
                                capture_output=True, timeout=120)
        stderr = result.stderr.decode("utf-8", "replace")
        assert result.returncode in expect_codes, (extra, result.returncode, stderr)
        assert "Traceback" not in stderr and READER_ERROR not in stderr, stderr
        result.stdout.decode("utf-8")  # whatever was printed is valid UTF-8
    return stderr


# PostgreSQL's YAML writer (explain_format.c, escape_yaml and ExplainYAMLLineStarting) writes
# mappings, lists, quoted strings and plain numbers only: never an anchor, alias or tag.
@pytest.mark.parametrize("make", [yaml_alias_bomb, yaml_merge_bomb], ids=["alias-bomb", "merge-bomb"])
def test_yaml_anchors_are_refused_before_expansion(make, tmp_path):
    start = time.perf_counter()
    with pytest.raises(PlanParseError) as err:
        planview.load(make(), engine="postgresql", fmt="yaml")
    assert time.perf_counter() - start < 5  # expanded, the first grew to 3.3 GB, the second ran 20 min
    assert "anchors" in err.value.message and err.value.line == 5  # the line of the first &name
    bomb = tmp_path / "bomb.yaml"
    bomb.write_text(make())
    assert "line 5" in check_cli_clean(bomb)


def test_yaml_alias_and_tag_name_their_line():
    lines = REAL_YAML.split("\n")
    alias = "\n".join(lines[:3] + ["    Output: *x"] + lines[3:])
    with pytest.raises(PlanParseError) as err:
        planview.load(alias, engine="postgresql", fmt="yaml")
    assert "aliases" in err.value.message and err.value.line == 4
    tagged = "\n".join(lines[:3] + ["    Extra: !!binary aGk="] + lines[3:])
    with pytest.raises(PlanParseError) as err:
        planview.load(tagged, engine="postgresql", fmt="yaml")
    assert "tags" in err.value.message and err.value.line == 4


@pytest.mark.parametrize("device", ["/dev/zero", "/dev/urandom"])
def test_endless_device_is_read_with_a_cap(device):
    """stat() says 0 bytes for a device: only the read itself can be trusted."""
    with pytest.raises(PlanParseError) as err:
        source_module.read_text(Path(device), max_bytes=10_000)
    assert "limit" in str(err.value) and "10,001 bytes" in str(err.value)


def test_cli_on_dev_zero_stops_at_the_limit():
    result = subprocess.run([sys.executable, "-m", "planview.cli", "check", "/dev/zero"],
                            capture_output=True, text=True, timeout=60)
    assert result.returncode == 2 and "limit" in result.stderr and "Traceback" not in result.stderr


def test_endless_fifo_is_read_with_a_cap(tmp_path):
    import os
    import threading

    fifo = tmp_path / "plan.fifo"
    os.mkfifo(fifo)

    def endless_writer():
        try:
            with open(fifo, "wb") as out:
                while True:
                    out.write(b"Seq Scan on t  (cost=0.00..1.00 rows=1 width=4)\n" * 1000)
        except (BrokenPipeError, OSError):
            pass

    writer = threading.Thread(target=endless_writer, daemon=True)
    writer.start()
    with pytest.raises(PlanParseError) as err:
        source_module.read_text(fifo, max_bytes=100_000)
    assert "limit" in str(err.value)
    writer.join(timeout=10)


def _json_plan(value: str) -> str:
    return ('[{"Plan": {"Node Type": "Seq Scan", "Relation Name": "t", "Plan Rows": 1,\n'
            f'  "Peak Memory Usage": {value}, "Actual Rows": 1, "Actual Loops": 1}}}}]')


# RFC 8259 section 6: NaN and Infinity are not JSON numbers; no count is 1e308 or larger.
@pytest.mark.parametrize("value", ["1" + "0" * 400, "9" * 5000, "1e999", "-1e999", "NaN",
                                   "Infinity", "-Infinity"],
                         ids=["int-above-1e308", "5000-digits", "float-overflow", "minus-overflow",
                              "nan", "infinity", "minus-infinity"])
def test_json_numbers_no_float_holds_are_refused_naming_key_and_line(value, tmp_path):
    with pytest.raises(PlanParseError) as err:
        planview.load(_json_plan(value))
    assert err.value.line == 2 and err.value.key == '"Peak Memory Usage"', str(err.value)
    plan = tmp_path / "plan.json"
    plan.write_text(_json_plan(value))
    assert "Peak Memory Usage" in check_cli_clean(plan)


def test_yaml_and_text_overlong_numbers_are_refused_naming_the_line():
    lines = REAL_YAML.split("\n")
    long_number = "\n".join(lines[:3] + ["    Peak: " + "9" * 5000] + lines[3:])
    with pytest.raises(PlanParseError) as err:
        planview.load(long_number, engine="postgresql", fmt="yaml")
    assert err.value.line == 4 and "digit" in err.value.message
    text = REAL_TEXT.replace("rows=", "rows=" + "9" * 5000, 1)
    with pytest.raises(PlanParseError) as err:
        planview.load(text, engine="postgresql", fmt="text")
    assert err.value.line == 1 and "finite" in err.value.message


@pytest.mark.parametrize("where", ["json-escape", "python-string"])
def test_lone_surrogate_is_read_as_replacement_and_said(where, tmp_path):
    doc = json.loads(REAL_JSON)
    doc[0]["Plan"]["Alias"] = "own\ud800ers"
    text = json.dumps(doc)  # ensure_ascii: the surrogate is written as the escape \ud800
    assert "\\ud800" in text
    source = text if where == "json-escape" else json.dumps(doc, ensure_ascii=False)
    plan = planview.load(source)
    assert plan.nodes[0].alias == "own\ufffders"
    assert any("surrogate" in note for note in plan.notes)
    plan.to_text().encode("utf-8")
    plan.to_json().encode("utf-8")
    if where == "json-escape":
        path = tmp_path / "plan.json"
        path.write_text(text)
        check_cli_clean(path, expect_codes=(0, 1))


def test_a_valid_surrogate_pair_is_kept():
    doc = json.loads(REAL_JSON)
    doc[0]["Plan"]["Alias"] = "owners\U0001F600"
    plan = planview.load(json.dumps(doc))
    assert plan.nodes[0].alias == "owners\U0001F600" and not any("surrogate" in n for n in plan.notes)


@pytest.mark.parametrize("key", ["Plans", "Workers", "Node Type", "__never__"])
def test_text_detail_line_with_a_structural_key_names_the_line(key, tmp_path):
    lines = REAL_TEXT.split("\n")
    lines.insert(1, f"  {key}: something")
    with pytest.raises(PlanParseError) as err:
        planview.load("\n".join(lines), engine="postgresql", fmt="text")
    assert err.value.line == 2 and key in err.value.message
    path = tmp_path / "plan.txt"
    path.write_text("\n".join(lines))
    check_cli_clean(path)


SCAN = "Seq Scan on t  (cost=0.00..1.00 rows=1 width=4) (actual time=0.010..0.020 rows=5000 loops=1)\n"


def test_repeated_and_wrapped_condition_lines_are_joined():
    text = SCAN + "  Filter: (a = 1)\n  Filter: (b = 2)\n  Filter: (c = 3)\n        OR (d = 4)\n"
    plan = planview.load(text)
    assert plan.nodes[0].condition_texts("filter") == ["(a = 1) AND (b = 2) AND (c = 3)\nOR (d = 4)"]


def test_fifty_thousand_clauses_split_in_order():
    from planview.diagnose.clauses import split_and_text

    text = "(" + " AND ".join(f"(t.c{i} = {i})" for i in range(50_000)) + ")"
    parts = split_and_text(text)
    assert len(parts) == 50_000 and parts[0] == "(t.c0 = 0)" and parts[-1] == "(t.c49999 = 49999)"


def test_long_condition_is_kept_but_not_parsed(monkeypatch):
    import sqlglot

    from planview.diagnose import clauses

    def refuse(text, *args, **kwargs):
        assert len(text) <= clauses.MAX_CONDITION_CHARS, "a long condition reached the SQL parser"
        return original(text, *args, **kwargs)

    original = sqlglot.parse_one
    monkeypatch.setattr(clauses.sqlglot, "parse_one", refuse)
    literal = "x" * 10_000_000
    plan = planview.load(SCAN + f"  Filter: (t.c = '{literal}'::text)\n")
    assert len(plan.nodes[0].conditions[0].text) > 10_000_000  # kept whole on the node
    lines = " ".join(plan.findings[0].evidence["lines"])
    assert "not parsed" in lines and "10,000,0" in lines and literal not in lines


def test_clauses_beyond_the_cap_are_counted_not_classified():
    from planview.diagnose.clauses import MAX_CLAUSES, parse_condition

    text = "(" + " AND ".join(f"(t.c{i} = {i})" for i in range(MAX_CLAUSES + 50)) + ")"
    found = parse_condition(text, "filter", "postgres")
    assert len(found) == MAX_CLAUSES + 1
    assert found[0].op_class == "unparsed" and "50 further" in found[0].text
    assert all(c.op_class == "equality" for c in found[1:])


def test_each_format_has_its_own_limit(monkeypatch):
    monkeypatch.setitem(source_module.FORMAT_LIMITS, "json", len(REAL_JSON) - 1)
    with pytest.raises(PlanParseError) as err:
        planview.load(REAL_JSON)
    assert "limit for json" in str(err.value)
    planview.load(REAL_TEXT)  # the text limit is its own


def test_own_error_beyond_a_float_is_not_computed():
    """A hostile plan whose figures sit at the count limit (1e100, PostgreSQL's own clamp) in
    opposite directions: the join's own error would be 10^400, past a float. It reads, the join
    says why it has no own error, and no q-error overflows."""
    def scan(name: str, est: float, actual: float, rel: str) -> dict:
        return {"Node Type": "Seq Scan", "Parent Relationship": rel, "Relation Name": name, "Alias": name,
                "Startup Cost": 0, "Total Cost": 1, "Plan Rows": est, "Plan Width": 4,
                "Actual Startup Time": 0, "Actual Total Time": 1, "Actual Rows": actual, "Actual Loops": 1}

    inner = {"Node Type": "Hash", "Parent Relationship": "Inner", "Startup Cost": 0, "Total Cost": 1,
             "Plan Rows": 1, "Plan Width": 4, "Actual Startup Time": 0, "Actual Total Time": 1,
             "Actual Rows": 1e100, "Actual Loops": 1, "Plans": [scan("b", 1, 1e100, "Outer")]}
    join = {"Node Type": "Hash Join", "Join Type": "Inner", "Parent Relationship": "Outer",
            "Startup Cost": 0, "Total Cost": 1, "Plan Rows": 1e100, "Plan Width": 4,
            "Actual Startup Time": 0, "Actual Total Time": 1, "Actual Rows": 0, "Actual Loops": 1e100,
            "Plans": [scan("a", 1, 1e100, "Outer"), inner]}
    root = {"Node Type": "Nested Loop", "Join Type": "Inner", "Startup Cost": 0, "Total Cost": 1,
            "Plan Rows": 1, "Plan Width": 4, "Actual Startup Time": 0, "Actual Total Time": 1,
            "Actual Rows": 0, "Actual Loops": 1,
            "Plans": [scan("c", 1, 1, "Outer"), join | {"Parent Relationship": "Inner"}]}
    plan = planview.load(json.dumps([{"Plan": root}]))
    plan.to_text(), plan.to_json(), plan.to_markdown()
    assert all(f.own_q_error < float("inf") for f in plan.findings)
    hash_join = next(n for n in plan.nodes if n.operator == "Hash Join")
    assert hash_join.own_log10_ratio is None or abs(hash_join.own_log10_ratio) <= 300
