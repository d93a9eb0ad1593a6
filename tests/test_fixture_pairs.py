"""Every bundled plan against the expected file beside it (plans/FIXTURES.md).

The expected files were written from the raw plan files and the planted defects of their
scenarios (plans/README.md, plans/ENGINES.md, plans/mysql/README.md), never from planview's
output. Where planview disagrees today, the pair carries an `xfail` with the reason, strict, so
a fix shows as an unexpected pass.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest

import planview

PLANS = Path(__file__).resolve().parents[1] / "plans"
EXPECTED_SUFFIX = ".expected.json"
# Files under plans/ that are not plans: documentation, the scenario, the capture scripts, the
# capture manifest and the expected files themselves.
NOT_PLANS = ("README.md", "ENGINES.md", "FIXTURES.md", "scenario.sql", "manifest.json",
             "capture_postgresql.py", "capture_engines.py", "capture_tpch.py", "capture_scenario2.py")
PAIRS_PENDING: tuple[str, ...] = ()
"""Captures (path prefixes relative to plans/) whose expected files are still being decided by
hand; until then tests/test_tpch_captures.py holds them to their node counts and rows. Empty:
every TPC-H capture has its pair."""


def _expected_files() -> list[Path]:
    return sorted(PLANS.rglob(f"*{EXPECTED_SUFFIX}"))


def _plan_files() -> set[Path]:
    return {p for p in PLANS.rglob("*") if p.is_file() and p.name not in NOT_PLANS
            and not p.name.endswith(EXPECTED_SUFFIX) and not _pending(p)}


def _pending(path: Path) -> bool:
    relative = path.relative_to(PLANS).as_posix()
    return relative.startswith(PAIRS_PENDING)


def _pairs() -> list:
    params = []
    for expected_path in _expected_files():
        expected = json.loads(expected_path.read_text())
        for name in expected["files"]:
            marks = [pytest.mark.xfail(strict=True, reason=x["reason"]) for x in expected.get("xfail", [])
                     if name in x.get("files", expected["files"])]
            params.append(pytest.param(expected_path, name, marks=marks,
                                       id=f"{expected_path.relative_to(PLANS).parent}/{name}"))
    return params


def test_every_bundled_plan_has_an_expected_file():
    covered = set()
    for expected_path in _expected_files():
        covered |= {expected_path.parent / name for name in json.loads(expected_path.read_text())["files"]}
    assert sorted(map(str, _plan_files() - covered)) == []
    assert sorted(map(str, covered - _plan_files())) == []


def _locate(plan, at: dict):
    """The one node the locator names: by pre-order id, or by operator/relation (and `nth`)."""
    if "id" in at:
        return plan.nodes[at["id"]]
    operators = at.get("operator")
    if isinstance(operators, str):
        operators = [operators]
    found = [n for n in plan.nodes
             if (operators is None or n.operator in operators)
             and ("relation" not in at or n.relation == at["relation"])]
    nth = at.get("nth")
    if nth is None:
        assert len(found) == 1, f"locator {at} matches {len(found)} nodes"
        return found[0]
    return found[nth]


def _close(actual, expected, tolerance: float) -> bool:
    if expected is None or actual is None:
        return actual is expected
    return math.isclose(actual, expected, rel_tol=tolerance, abs_tol=tolerance)


@pytest.mark.parametrize(("expected_path", "name"), _pairs())
def test_plan_matches_its_expected_file(expected_path: Path, name: str):
    expected = json.loads(expected_path.read_text())
    file_spec = expected["files"][name]
    plan = planview.load(expected_path.parent / name)
    lacks = set(file_spec.get("lacks", ()))
    if file_spec.get("estimates_only"):
        lacks |= {"actual_rows", "starts"}

    assert len(plan.nodes) == file_spec["node_count"]
    for entry in file_spec.get("nodes", expected["tree"]):
        node = _locate(plan, entry["at"])
        where = f"{name} {entry['at']}"
        if "operator" in entry:
            spellings = entry["operator"] if isinstance(entry["operator"], list) else [entry["operator"]]
            assert node.operator in spellings, where
        if "relation" in entry:
            assert node.relation == entry["relation"], where
        tolerance = entry.get("tolerance", 1e-6)
        for field in ("est_rows", "actual_rows", "starts"):
            if field in entry:
                want = None if field in lacks else entry[field]
                assert _close(getattr(node, field), want, tolerance), \
                    f"{where} {field}: {getattr(node, field)} != {want}"

    if lacks & {"est_rows", "actual_rows"}:
        # Without both numbers nothing can be judged, so nothing can be an origin.
        assert plan.findings == [], name
        return
    causes = {f.node: f.cause for f in plan.findings}
    for origin in expected["origins"]:
        node = _locate(plan, origin["at"])
        assert node.id in causes, f"{name}: {origin['at']} is not an origin ({origin['reason']})"
        want = origin.get("cause_by_file", {}).get(name, origin.get("cause"))
        if want is None:
            continue  # an origin whose cause the expected file does not name (see FIXTURES.md)
        assert causes[node.id] == want, f"{name}: {origin['at']} cause {causes[node.id]} != {want}"
    for quiet in expected["quiet"]:
        node = _locate(plan, quiet["at"])
        assert node.id not in causes, f"{name}: {quiet['at']} is an origin but {quiet['reason']}"
    if expected.get("only_these_origins", True):
        wanted = {_locate(plan, o["at"]).id for o in expected["origins"]}
        assert set(causes) == wanted, f"{name}: origins {sorted(causes)} != expected {sorted(wanted)}"
