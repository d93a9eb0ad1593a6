"""The layout the code promises: engine knowledge stays in `planview/engines/`, and the core
never imports the notebook layer.

The operator names and keys checked for are read from the engines' own tables, so the list
cannot drift from what the engines print.
"""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

from planview import engines

PACKAGE = Path(__file__).resolve().parent.parent / "planview"
# planview/probe/ speaks to one engine by design (its SQL, its catalogue): it is engine code too
ENGINE_CODE = (PACKAGE / "engines", PACKAGE / "probe")


def _engine_words() -> dict[str, str]:
    """Each engine's operator names and key spellings that cannot be plain English: a name
    with a space, an underscore, a hyphen or an inner capital (``Seq Scan``, ``HASH_JOIN``,
    ``block-nl-join``, ``BitmapAnd``, ``Group Key``), by the engine that prints it."""
    words: dict[str, str] = {}
    for name, module in engines.engines().items():
        engine = engines.engine_of(module)
        tables = (engine.INPUT_RULES, engine.JOINS, engine.BLOCKING, engine.LIMITS,
                  engine.WHOLE_RELATION_SCANS, engine.CONDITION_PROVIDERS, engine.COMPLETE_INNER,
                  engine.ROWS_DISCARDED_KEYS, (engine.GROUP_KEYS or "",))
        for table in tables:
            for word in table:
                if re.search(r"[ _-]|[a-z][A-Z]", word):
                    words.setdefault(word, name)
    return words


def _core_files() -> list[Path]:
    return sorted(p for p in PACKAGE.rglob("*.py") if not any(p.is_relative_to(d) for d in ENGINE_CODE))


def test_the_engine_tables_give_words_to_look_for():
    words = _engine_words()
    # one name a built-in engine is known to print, so the search below is not empty
    assert {"Seq Scan", "HASH_JOIN", "block-nl-join", "Group Key"} <= set(words)


def test_no_operator_name_or_engine_key_outside_the_engines():
    words = _engine_words()
    pattern = re.compile("|".join(rf"(?<![\w]){re.escape(w)}(?![\w])" for w in sorted(words, key=len, reverse=True)))
    found = []
    for path in _core_files():
        for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1):
            for match in pattern.finditer(line):
                found.append(f"{path.relative_to(PACKAGE.parent)}:{number}: {match.group(0)!r} "
                             f"({words[match.group(0)]})")
    assert not found, "engine names outside planview/engines/:\n" + "\n".join(found)


def test_no_access_type_literal_outside_the_engines():
    """Single-word access types in capitals (MariaDB's ``ALL``) are caught as quoted literals."""
    literals = set()
    for module in engines.engines().values():
        engine = engines.engine_of(module)
        literals |= {w for w in engine.WHOLE_RELATION_SCANS if w.isalpha() and w.isupper()}
    assert literals
    pattern = re.compile("|".join(rf"[\"']{re.escape(w)}[\"']" for w in sorted(literals)))
    found = [f"{p.relative_to(PACKAGE.parent)}:{n}: {line.strip()}" for p in _core_files()
             for n, line in enumerate(p.read_text(encoding="utf-8").splitlines(), 1) if pattern.search(line)]
    assert not found, "\n".join(found)


def test_no_sql_dialect_default_outside_the_engines():
    dialects = {engines.engine_of(m).dialect for m in engines.engines().values()} - {None}
    pattern = re.compile(r"=\s*[\"'](" + "|".join(map(re.escape, sorted(dialects))) + r")[\"']")
    found = [f"{p.relative_to(PACKAGE.parent)}:{n}" for p in _core_files()
             for n, line in enumerate(p.read_text(encoding="utf-8").splitlines(), 1) if pattern.search(line)]
    assert not found, found


def test_the_core_does_not_import_the_notebook_layer():
    """Loading, checking and every view but the widget work without `planview.widget`."""
    plan_file = PACKAGE.parent / "plans" / "postgresql" / "pg16" / "append.json"
    script = (
        "import sys, planview\n"
        f"plan = planview.load({str(plan_file)!r})\n"
        "plan.report(); plan.to_text(); plan.to_markdown(); plan.to_html(); plan._repr_html_()\n"
        "print('planview.widget' in sys.modules)\n"
    )
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, check=True,
                         cwd=PACKAGE.parent)
    assert out.stdout.strip() == "False", out.stderr
