"""The real plans captured from real PostgreSQL servers (plans/postgresql/, see its README)."""

from __future__ import annotations

import json
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1] / "plans" / "postgresql"
MANIFEST = json.loads((ROOT / "manifest.json").read_text()) if (ROOT / "manifest.json").exists() else {"servers": {}}
VERSIONS = sorted(MANIFEST["servers"])
FORMAT_FILES = {"text": "text.txt", "json": "json", "xml": "xml", "yaml": "yaml",
                "psql_text": "psql.txt", "psql_json": "psql.json.txt"}


def is_capture(plan_path: Path) -> bool:
    """False for the files beside the captures that are not plans (plans/FIXTURES.md)."""
    return not plan_path.name.endswith(".expected.json") and plan_path.name != "manifest.json"


def cases(version: str) -> dict:
    return MANIFEST["servers"][version]["cases"]


def path(version: str, case: str, fmt: str) -> Path:
    return ROOT / f"pg{version}" / f"{case}.{FORMAT_FILES[fmt]}"


def all_case_ids() -> list[tuple[str, str]]:
    return [(v, c) for v in VERSIONS for c in cases(v)]


def with_payloads(plan_path: Path, payloads: dict[str, str]) -> list:
    """A captured JSON plan with the named keys (names, conditions) replaced on every node:
    real structure and numbers, hostile strings where a plan carries text."""
    data = json.loads(plan_path.read_text())
    todo = [statement["Plan"] for statement in data]
    while todo:
        node = todo.pop()
        for key, value in payloads.items():
            if key in node:
                node[key] = value
        todo.extend(node.get("Plans", []))
    return data


def raw_json_statements(path) -> list[dict]:
    """The statements of a raw PostgreSQL JSON paste (several documents one after another),
    read with json alone (the independent reading the tests compare planview with)."""
    text = Path(path).read_text(encoding="utf-8")
    decoder, at, found = json.JSONDecoder(), 0, []
    while True:
        while at < len(text) and text[at].isspace():
            at += 1
        if at >= len(text):
            return found
        doc, at = decoder.raw_decode(text, at)
        found += doc
