"""Fuzzing the PostgreSQL readers: mutated real plans and random text.

Nothing but PlanParseError may escape `planview.load` (and a successful load must give a
report that serialises). Inputs: real PG 16 captures in the four formats and psql's display.
"""

from __future__ import annotations

import json

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from plan_files import path

import planview
from planview import PlanParseError
from planview.plan import READER_ERROR

SEEDS = [path("16", case, fmt).read_text()
         for case in ("nested_loop_inherited", "cte", "subplan", "parallel", "multi")
         for fmt in ("text", "json", "xml", "yaml", "psql_text", "psql_json")]

FUZZ = settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def must_not_crash(text: str) -> None:
    try:
        plan = planview.load(text)
    except PlanParseError as exc:
        # the safety net in planview.load turns a reader's own bug into this message: a bug
        assert READER_ERROR not in str(exc), str(exc)
        return
    json.dumps(plan.report(), allow_nan=False)
    plan.to_text(width=100)


@st.composite
def mutated(draw):
    text = draw(st.sampled_from(SEEDS))
    for _ in range(draw(st.integers(1, 4))):
        kind = draw(st.sampled_from(["truncate", "flip", "delete_line", "duplicate_line",
                                     "swap_number", "insert", "indent", "dot"]))
        if not text:
            break
        if kind == "truncate":
            text = text[: draw(st.integers(0, len(text)))]
        elif kind == "flip":
            i = draw(st.integers(0, len(text) - 1))
            text = text[:i] + chr(draw(st.integers(0, 0x2FF))) + text[i + 1:]
        elif kind in ("delete_line", "duplicate_line", "indent"):
            lines = text.split("\n")
            i = draw(st.integers(0, len(lines) - 1))
            if kind == "delete_line":
                del lines[i]
            elif kind == "duplicate_line":
                lines.insert(i, lines[i])
            else:
                lines[i] = " " * draw(st.integers(1, 9)) + lines[i]
            text = "\n".join(lines)
        elif kind == "swap_number":
            word = draw(st.sampled_from(["-1", "many", "1e309", "NaN", "true", "null", "[]", "{}", '"x"', "0"]))
            digits = [i for i, ch in enumerate(text) if ch.isdigit()]
            if digits:
                i = draw(st.sampled_from(digits))
                text = text[:i] + word + text[i + 1:]
        elif kind == "dot":  # a second decimal point inside a number: "1.2.3"
            digits = [i for i, ch in enumerate(text) if ch.isdigit()]
            if digits:
                i = draw(st.sampled_from(digits))
                text = text[:i] + "." + text[i:]
        else:
            i = draw(st.integers(0, len(text)))
            text = text[:i] + draw(st.text(max_size=20)) + text[i:]
    return text


@FUZZ
@given(mutated())
def test_mutated_real_plans(text):
    must_not_crash(text)


@FUZZ
@given(st.text(max_size=400))
def test_random_text(text):
    must_not_crash(text)


@FUZZ
@given(st.recursive(st.none() | st.booleans() | st.floats() | st.integers() | st.text(max_size=10),
                    lambda kids: st.lists(kids, max_size=4)
                    | st.dictionaries(st.sampled_from(["Plan", "Plans", "Node Type", "Plan Rows",
                                                       "Actual Rows", "Actual Loops", "Filter",
                                                       "Workers", "Relation Name", "x"]), kids, max_size=5),
                    max_leaves=30))
def test_random_json_shapes(doc):
    try:
        text = json.dumps([{"Plan": doc}])
    except ValueError:
        return
    must_not_crash(text)
