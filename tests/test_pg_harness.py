"""Quick checks that the PostgreSQL harness and the planted scenario work.

These test the harness (tests/pgharness.py), not planview.
"""

import json
import re
import xml.dom.minidom

import pytest
from pgharness import CASES, CASES_BY_NAME, explain_statement, join_outputs, parse_json_outputs

pytestmark = pytest.mark.pg

OPERATOR = re.compile(r"^[A-Z][A-Za-z ]+(?: on \S+| using \S+)?.*\(cost=[\d.]+\.\.[\d.]+ rows=\d+ width=\d+\)")


def test_server_answers(pg_servers):
    with pg_servers.connect() as conn:
        version, num = conn.execute(
            "SELECT version(), current_setting('server_version_num')::int"
        ).fetchone()
    assert version.startswith("PostgreSQL ")
    assert num // 10000 == pg_servers.version
    assert pg_servers.version >= 15
    assert f"host={pg_servers.socket_dir}" in pg_servers.dsn


def test_listens_only_on_its_socket(pg_servers):
    with pg_servers.connect() as conn:
        listen, sockets = conn.execute(
            "SELECT current_setting('listen_addresses'), current_setting('unix_socket_directories')"
        ).fetchone()
    assert listen == ""
    assert sockets == str(pg_servers.socket_dir)


def test_text_explain_starts_with_an_operator(pg_servers):
    out = pg_servers.explain("SELECT relname FROM pg_class WHERE relkind = 'r'", "text")
    lines = out.split("\n")
    assert OPERATOR.match(lines[0]), lines[0]
    assert "actual" in lines[0]
    assert lines[-1].startswith("Execution Time: ")
    assert not out.endswith("\n")


def test_json_explain_parses(pg_servers):
    out = pg_servers.explain("SELECT count(*) FROM pg_class", "json", ("ANALYZE", "BUFFERS"))
    doc = json.loads(out)
    assert isinstance(doc, list) and len(doc) == 1
    plan = doc[0]["Plan"]
    assert plan["Node Type"] == "Aggregate"
    assert plan["Actual Loops"] == 1
    assert "Execution Time" in doc[0]


def test_xml_and_yaml_come_as_one_row(pg_servers):
    out = pg_servers.explain("SELECT 1", "xml")
    xml.dom.minidom.parseString(out)
    assert out.startswith("<explain xmlns=")
    out = pg_servers.explain("SELECT 1", "yaml", ())
    assert out.startswith("- Plan: ")


def test_explain_settings_are_local(pg_servers):
    out = pg_servers.explain("SELECT 1", "text", ("SETTINGS",), settings={"enable_seqscan": "off"})
    assert "enable_seqscan = 'off'" in out
    with pg_servers.connect() as conn:
        assert conn.execute("SHOW enable_seqscan").fetchone()[0] == "on"


def test_psql_output_is_decorated(pg_servers):
    out = pg_servers.psql_explain("SELECT 1", "text")
    lines = out.split("\n")
    assert lines[0].strip() == "QUERY PLAN"
    assert set(lines[1]) == {"-"}
    assert lines[2].startswith(" Result  (cost=")
    assert re.fullmatch(r"\(\d+ rows\)", [x for x in lines if x][-1])
    out = pg_servers.psql_explain("SELECT 1", "json")
    assert " [" in out.split("\n")[2] and out.split("\n")[2].endswith("+")
    assert "(1 row)" in out


def test_statement_builder():
    assert explain_statement("SELECT 1;", "json", ("ANALYZE", "BUFFERS")) == \
        "EXPLAIN (ANALYZE, BUFFERS, FORMAT JSON) SELECT 1"
    with pytest.raises(ValueError):
        explain_statement("SELECT 1", "html")


def test_joined_json_outputs_parse():
    one = '[\n  {\n    "Plan": {\n      "Node Type": "Result"\n    }\n  }\n]'
    assert len(parse_json_outputs(join_outputs([one, one], "json"))) == 2
    merged = join_outputs([one, one], "json", as_one_array=True)
    assert len(json.loads(merged)) == 2


@pytest.mark.parametrize("name", [c.name for c in CASES if c.analyze])
def test_planted_defect_shows(scenario_db, name):
    res = scenario_db.check_case(name)
    assert res.ok, res.message


def test_estimates_only_runs_nothing(scenario_db):
    out = scenario_db.explain_case("estimates_only", "text")
    assert "actual" not in out and "Execution Time" not in out
    assert OPERATOR.match(out.split("\n")[0])


def test_multi_paste_holds_two_plans(scenario_db):
    case = CASES_BY_NAME["multi"]
    assert len(case.sql) == 2
    assert len(parse_json_outputs(scenario_db.explain_case("multi", "json"))) == 2
    text = scenario_db.explain_case("multi", "text")
    assert text.count("Execution Time:") == 2
