"""Fuzzing the DuckDB, MariaDB and MySQL readers: nothing but PlanParseError may escape.

Seeds are the bundled real outputs (plans/duckdb, plans/mariadb) and the MySQL manual's
examples (plans/mysql). Mutations: truncation, byte flips, swapped values, deleted keys,
wrong types; plus random text. Each test is bounded by max_examples.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from hostile_inputs import json_objects
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import planview
from planview.errors import PlanParseError
from planview.plan import READER_ERROR

PLANS = Path(__file__).resolve().parent.parent / "plans"
SEEDS = {
    engine: sorted(p for p in (PLANS / engine).rglob("*") if p.suffix in (".json", ".txt"))
    for engine in ("duckdb", "mariadb", "mysql")
}
FUZZ = settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def attempt(text: str, engine: str | None = None, fmt: str | None = None) -> None:
    try:
        plan = planview.load(text, engine=engine, fmt=fmt)
    except PlanParseError as exc:
        # the safety net in planview.load turns a reader's own bug into this message: a bug
        assert READER_ERROR not in str(exc), str(exc)
        return
    plan.report()  # every view is made from the report: it must build too


def seed_text(engine: str, index: int) -> tuple[str, str]:
    files = SEEDS[engine]
    path = files[index % len(files)]
    text = path.read_text(encoding="utf-8")
    if engine == "duckdb":
        fmt = "json" if path.suffix == ".json" else "text"
    elif engine == "mariadb":
        fmt = "json" if path.suffix == ".json" else "table"
    else:
        fmt = "json" if path.suffix == ".json" else "tree"
    return text, fmt


def mutate_json(doc, draw_ops):
    """Apply mutations to a JSON document: delete keys, swap values, wrong types."""
    nodes = json_objects(doc)
    for op, pick, value in draw_ops:
        if not nodes:
            break
        target = nodes[pick % len(nodes)]
        keys = list(target)
        if not keys:
            continue
        key = keys[pick % len(keys)]
        if op == "delete":
            target.pop(key, None)
        elif op == "type":
            target[key] = value
        elif op == "swap" and len(keys) > 1:
            other = keys[(pick + 1) % len(keys)]
            target[key], target[other] = target[other], target[key]
    return doc


WRONG = st.one_of(st.none(), st.booleans(), st.integers(-10**6, 10**12), st.floats(allow_nan=True),
                  st.text(max_size=8), st.lists(st.integers(), max_size=3), st.just({}),
                  st.just("NaN"), st.just(-1), st.just(1e308))
OPS = st.lists(st.tuples(st.sampled_from(["delete", "type", "swap"]), st.integers(0, 10**6), WRONG),
               min_size=1, max_size=6)


@pytest.mark.parametrize("engine", ["duckdb", "mariadb", "mysql"])
@FUZZ
@given(index=st.integers(0, 1000), cut=st.floats(0, 1), flips=st.lists(
    st.tuples(st.integers(0, 10**6), st.integers(0, 255)), max_size=5))
def test_truncation_and_byte_flips(engine, index, cut, flips):
    text, fmt = seed_text(engine, index)
    data = bytearray(text[: int(len(text) * cut)].encode("utf-8"))
    for position, byte in flips:
        if data:
            data[position % len(data)] = byte
    attempt(bytes(data).decode("utf-8", errors="replace"), engine, fmt)
    attempt(bytes(data).decode("utf-8", errors="replace"))


@pytest.mark.parametrize("engine", ["duckdb", "mariadb", "mysql"])
@FUZZ
@given(index=st.integers(0, 1000), ops=OPS)
def test_json_structure_mutations(engine, index, ops):
    files = [p for p in SEEDS[engine] if p.suffix == ".json"]
    text = files[index % len(files)].read_text(encoding="utf-8")
    doc = mutate_json(json.loads(text), ops)
    attempt(json.dumps(doc), engine, "json")


@pytest.mark.parametrize("engine", ["duckdb", "mariadb", "mysql"])
@FUZZ
@given(index=st.integers(0, 1000), line=st.integers(0, 10**6), replacement=st.text(max_size=40),
       number=st.sampled_from(["-1", "NaN", "1e999", "x", "", "0", "1.5e+3", "inf"]))
def test_text_line_mutations(engine, index, line, replacement, number):
    files = [p for p in SEEDS[engine] if p.suffix == ".txt"]
    text = files[index % len(files)].read_text(encoding="utf-8")
    lines = text.splitlines()
    if lines:
        at = line % len(lines)
        lines[at] = lines[at].replace("rows", f"rows{replacement}", 1) if line % 3 == 0 else \
            __import__("re").sub(r"\d+(\.\d+)?", number, lines[at], count=1) if line % 3 == 1 else replacement
    _, fmt = seed_text(engine, SEEDS[engine].index(files[index % len(files)]))
    attempt("\n".join(lines), engine, fmt)


@FUZZ
@given(st.text(alphabet=st.sampled_from(list("{}[]\":,0123456789.-e ->|+\n()=┌─┐│└┘╭╮╰╯~abcrows")),
               max_size=300))
def test_random_text(text):
    attempt(text)
    for engine, fmt in (("duckdb", "text"), ("duckdb", "json"), ("mariadb", "table"), ("mariadb", "json"),
                        ("mysql", "tree"), ("mysql", "json")):
        attempt(text, engine, fmt)


def test_deep_nesting_is_refused():
    deep = '{"operator": [' + '{"name": "PROJECTION", "children": [' * 3000 + "]}" * 3000 + "]}"
    with pytest.raises(PlanParseError):
        planview.load(deep, engine="duckdb", fmt="json")
    blocks = '{"query_block": ' + '{"select_id": 1, "table": {"table_name": "<derived2>", "access_type": "ALL", "rows": 1, "materialized": {"query_block": ' * 600 + "{}" + "}}}" * 600 + "}"
    with pytest.raises(PlanParseError):
        planview.load(blocks, engine="mariadb", fmt="json")
