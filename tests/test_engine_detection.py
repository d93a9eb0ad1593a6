"""Every bundled plan is detected as its own engine and format; engine=/fmt= override.

Sources: the files under plans/ (real DuckDB and MariaDB runs, PostgreSQL captures, the
MySQL manual's examples; see plans/ENGINES.md and plans/mysql/README.md).
"""

from __future__ import annotations

from pathlib import Path

import pytest
from plan_files import is_capture

import planview
from planview import engines
from planview.errors import PlanParseError

PLANS = Path(__file__).resolve().parent.parent / "plans"


def expected(path: Path) -> tuple[str, str]:
    engine = path.relative_to(PLANS).parts[0]
    if engine == "duckdb":
        return engine, "json" if path.suffix == ".json" else "text"
    if engine == "mariadb":
        return engine, "json" if path.suffix == ".json" else "table"
    if engine == "mysql":
        return engine, "json" if path.suffix == ".json" else "tree"
    name = path.name
    fmt = {".json": "json", ".xml": "xml", ".yaml": "yaml"}.get(path.suffix, "text")
    if name.endswith(".psql.json.txt"):
        fmt = "json"
    return engine, fmt


FILES = sorted(p for engine in ("duckdb", "mariadb", "mysql", "postgresql")
               for p in (PLANS / engine).rglob("*")
               if p.is_file() and p.suffix in (".json", ".txt", ".xml", ".yaml")
               and is_capture(p))


@pytest.mark.parametrize("path", FILES, ids=lambda p: str(p.relative_to(PLANS)))
def test_each_bundled_plan_is_detected_as_its_own(path):
    module, fmt = engines.detect(path.read_text(encoding="utf-8"))
    assert (module.NAME, fmt) == expected(path)


@pytest.mark.parametrize("path", FILES, ids=lambda p: str(p.relative_to(PLANS)))
def test_no_other_engine_claims_it(path):
    text = path.read_text(encoding="utf-8")
    own, _ = expected(path)
    mine = engines.get(own).detect(text)
    assert mine is not None
    for name, module in engines.engines().items():
        if name == own:
            continue
        guess = module.detect(text)
        assert guess is None or guess[1] < mine[1], f"{name} claims {path.name} with {guess}"


def test_overrides():
    duck = next(filter(is_capture, (PLANS / "duckdb").glob("*.json")))
    plan = planview.load(duck, engine="duckdb", fmt="json")
    assert (plan.engine, plan.format) == ("duckdb", "json")
    with pytest.raises(PlanParseError):
        planview.load(duck, engine="mariadb", fmt="json")  # forced onto the wrong reader
    table = next((PLANS / "mariadb").glob("*.txt"))
    assert planview.load(table, engine="mariadb").format == "table"
    tree = PLANS / "mysql" / "8.0-hash-join.txt"
    assert planview.load(tree, fmt="tree").engine == "mysql"


def test_report_names_the_engine():
    for engine in ("duckdb", "mariadb", "mysql"):
        path = next(p for p in FILES if expected(p)[0] == engine)
        assert planview.load(path).report()["engine"] == engine


def test_unknown_text_is_refused_with_the_known_engines():
    with pytest.raises(PlanParseError) as err:
        planview.load("hello\nworld\n")
    for name in ("duckdb", "mariadb", "mysql", "postgresql"):
        assert name in str(err.value)
