"""The ticket text and the terminal table keep hostile plan names inert.

A captured PostgreSQL 16 plan gets addresses, mentions, backtick runs, ESC sequences and
direction overrides where it carries names (tests/plan_files.py `with_payloads`). The Markdown
is rendered by mistune with its autolink plugin (the GFM "extended autolink" rule: www., a
scheme, an e-mail) and raw HTML let through; no link, mention or markup may come out, and
no control or direction character may stay raw (Unicode bidirectional controls U+202A-U+202E,
U+2066-U+2069, per Unicode Standard Annex #9; C0/C1 controls per ECMA-48).
"""

from __future__ import annotations

import html
import html.parser
import json
import re
from pathlib import Path

import pytest
from plan_files import with_payloads

import planview
from planview import textreport
from planview.inert import visible

PG16 = Path(__file__).resolve().parent.parent / "plans" / "postgresql" / "pg16"
BIDI = "\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069"
RAW = re.compile("[\x00-\x09\x0b-\x1f\x7f-\x9f" + BIDI + "\u2028\u2029\u200b-\u200f\ufeff]")

PAYLOADS = {
    "Relation Name": "https://evil.example/steal?x=1 owners\u202egnp.exe",
    "Alias": "www.evil.example",
    "Index Name": "``idx` @channel ops@evil.example \x1b[2J\x1b]8;;https://evil.example\x07x",
    "Filter": "(town = 'mailto:a@evil.example' AND postcode = '\u2066\u202e``` `x` \x1b[31mred')",
}


def hostile(case: str = "nested_loop_inherited"):
    return planview.load(json.dumps(with_payloads(PG16 / f"{case}.json", PAYLOADS)))


class Tags(html.parser.HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


@pytest.mark.parametrize("case", ["nested_loop_inherited", "correlated", "function", "skewed"])
def test_markdown_makes_no_link_and_keeps_no_raw_control(case):
    import mistune
    plan = hostile(case)
    text = plan.to_markdown()
    assert not RAW.search(text), RAW.search(text)
    assert "\\u202e" in text and "\\x1b" in text  # shown, as escapes
    rendered = mistune.create_markdown(escape=False, plugins=["table", "url"])(text)
    parsed = Tags()
    parsed.feed(rendered)
    assert not [t for t, _ in parsed.tags if t in ("a", "script", "img", "svg", "iframe")], rendered
    shown = "".join(parsed.text)
    assert "https://evil.example/steal?x=1" in shown and "www.evil.example" in shown


def test_markdown_names_go_out_as_code_spans():
    import mistune
    plan = hostile("correlated")
    text = plan.to_markdown()
    rendered = mistune.create_markdown(escape=False, plugins=["table", "url"])(text)
    # each label (with its backtick runs) is one code span: a longer fence holds it whole
    codes = re.findall(r"<code>(.*?)</code>", rendered, re.S)
    label = next(n["label"] for n in plan.report()["nodes"] if "evil" in n["label"])
    assert any(html.unescape(c) == visible(label) for c in codes), codes


def test_terminal_table_writes_no_escape_sequence():
    plan = hostile("correlated")
    out = textreport.render(plan, width=160)
    assert "\x1b" not in out and not RAW.search(out.replace("\n", " "))
    assert "\\u202e" in out
    coloured = textreport.render(plan, width=160, color=True)
    # only planview's own bold marking is a raw escape sequence
    assert set(re.findall(r"\x1b\[[0-9;]*m", coloured)) <= {"\x1b[1m", "\x1b[0m"}
    assert "\x1b[2J" not in coloured and "\x1b]8" not in coloured

