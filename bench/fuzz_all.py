"""A long fuzz run over every reader and every export: only PlanParseError may escape.

Seeds are every bundled plan (plans/: each engine, each format). Each input is a mutation of
a seed (truncation, byte and line edits, hostile numbers and strings, JSON structure edits,
YAML anchors and tags, XML declarations) or a random structure; every plan that loads is
rendered with to_text, to_json, to_markdown, to_html and to_frame. Failures (any other
exception, or the reader-failed fallback message) are counted by kind and saved.

Run: python bench/fuzz_all.py --n 100000 [--seed 1] [--workers 2] [--save DIR]
"""

from __future__ import annotations

import argparse
import json
import multiprocessing
import random
import sys
import time
import traceback
from collections import Counter
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from hostile_inputs import json_objects  # noqa: E402

import planview  # noqa: E402
from planview.errors import PlanParseError  # noqa: E402
from planview.plan import READER_ERROR  # noqa: E402

SEEDS = sorted(p for p in (ROOT / "plans").rglob("*")
               if p.suffix in (".txt", ".json", ".xml", ".yaml") and not p.name.startswith("README")
               and p.name != "manifest.json")
SEED_TEXT = [p.read_text(encoding="utf-8") for p in SEEDS]

HOSTILE_NUMBERS = ["-1", "1e999", "-1e999", "NaN", "Infinity", "-Infinity", "1" + "0" * 400,
                   "9" * 5000, "1.2.3", "0x10", "1e-400", "-0", "1_000", "١٢٣", ".5", "5.",
                   "18446744073709551616", "1e308", "nan", ".inf", "~", "true"]
HOSTILE_STRINGS = ["\\ud800", "\\udfff", "\\ud83d\\ude00", "'\\'", "\u202e", "\x00", "\x1b[31m",
                   "<script>alert(1)</script>", "]]>", "&lol;", "*a", "&a x", "!!python/name:os.system",
                   "<<: *a", "Plans:", "Workers:", "->", "  ->  Seq Scan on t  (cost=0.00..1.00 rows=1 width=4)",
                   "InitPlan 1", "SubPlan 2", "(never executed)", "{", "[", "\"", "\n", "\t",
                   "http://evil.example/x", "'" * 3, "$1", "(InitPlan 1).col1", " AND " * 20]
STRUCTURE_KEYS = ["Plan", "Plans", "Node Type", "Plan Rows", "Actual Rows", "Actual Loops",
                  "Filter", "Workers", "Relation Name", "Parent Relationship", "Subplan Name",
                  "CTE Name", "Workers Planned", "query_block", "children", "operator_name",
                  "table", "nested_loop", "rows_examined_per_scan", "r_rows", "cardinality"]
STRUCTURE_VALUES = [None, True, False, 0, -1, 1.5, 10**30, "x", "", [], {}, [{}], [1, 2],
                    {"Node Type": "Seq Scan"}, "Seq Scan", "Hash Join", "Inner", "SubPlan 1",
                    "CTE x", 1e308, "NaN"]


def mutate(rng: random.Random, text: str) -> str:
    """One to three random edits of a plan text."""
    for _ in range(rng.choice((1, 1, 1, 2, 3))):
        choice = rng.random()
        if not text:
            return text
        if choice < 0.12:
            text = text[: rng.randint(0, len(text))]
        elif choice < 0.25:
            chars = list(text)
            for _ in range(rng.randint(1, 8)):
                chars[rng.randrange(len(chars))] = rng.choice("(){}[]<>\"':,=.-+ \n\t0123456789aZ&*!#|\\")
            text = "".join(chars)
        elif choice < 0.45:
            import re

            numbers = list(re.finditer(r"-?\d+(?:\.\d+)?", text))
            if numbers:
                found = rng.choice(numbers)
                text = text[: found.start()] + rng.choice(HOSTILE_NUMBERS) + text[found.end():]
        elif choice < 0.60:
            at = rng.randrange(len(text))
            text = text[:at] + rng.choice(HOSTILE_STRINGS) + text[at:]
        elif choice < 0.75:
            lines = text.split("\n")
            i, j = rng.randrange(len(lines)), rng.randrange(len(lines))
            edit = rng.random()
            if edit < 0.3:
                del lines[i]
            elif edit < 0.6:
                lines.insert(i, lines[j])
            elif edit < 0.8:
                lines[i], lines[j] = lines[j], lines[i]
            else:
                lines[i] = " " * rng.randint(0, 12) + lines[i].lstrip()
            text = "\n".join(lines)
        elif choice < 0.90:
            text = mutate_json(rng, text)
        else:
            text = mutate_markup(rng, text)
    return text


def mutate_json(rng: random.Random, text: str) -> str:
    try:
        doc = json.loads(text)
    except ValueError:
        return text
    nodes = json_objects(doc)
    if not nodes:
        return text
    target = rng.choice(nodes)
    keys = list(target)
    edit = rng.random()
    if keys and edit < 0.3:
        target.pop(rng.choice(keys))
    elif keys and edit < 0.6:
        target[rng.choice(keys)] = rng.choice(STRUCTURE_VALUES)
    elif edit < 0.8:
        target[rng.choice(STRUCTURE_KEYS)] = rng.choice(STRUCTURE_VALUES)
    elif keys:
        key = rng.choice(keys)
        target[key] = [target[key]] if rng.random() < 0.5 else {"Plan": target[key]}
    return json.dumps(doc, indent=rng.choice([None, 2]))


def mutate_markup(rng: random.Random, text: str) -> str:
    """YAML anchors, aliases and tags; XML declarations, CDATA and deep nesting."""
    lines = text.split("\n")
    i = rng.randrange(len(lines))
    if text.lstrip().startswith("<"):
        piece = rng.choice(['<!DOCTYPE x [<!ENTITY a "b">]>', "<![CDATA[x]]>", "<!-- c -->",
                            "<Plans><Plan></Plan></Plans>", "<Plan>" * 50 + "</Plan>" * 50, "&a;",
                            "<?pi x?>", "<Node-Type/>"])
    else:
        piece = rng.choice(["x: &a [1, 2]", "y: *a", "    z: !!python/object/apply:os.system [x]",
                            "  <<: {a: 1}", "---", "...", "- Plan:", "    Plans:", "? [a]\n  : b",
                            "    k: !!binary aGk=", "    k: 0o17", "    k: 1:20"])
    lines.insert(i, piece)
    return "\n".join(lines)


def random_structure(rng: random.Random, budget: int = 40):
    kind = rng.random()
    if budget <= 0 or kind < 0.3:
        return rng.choice(STRUCTURE_VALUES)
    if kind < 0.6:
        return [random_structure(rng, budget // 3) for _ in range(rng.randint(0, 3))]
    return {rng.choice(STRUCTURE_KEYS): random_structure(rng, budget // 3) for _ in range(rng.randint(0, 5))}


def make_input(rng: random.Random) -> tuple[str, str | None, str | None]:
    """(text, forced engine, forced format)."""
    roll = rng.random()
    if roll < 0.80:
        text = mutate(rng, rng.choice(SEED_TEXT))
    elif roll < 0.92:
        doc = random_structure(rng)
        if rng.random() < 0.7:
            doc = [{"Plan": {"Node Type": "Seq Scan", "Plans": [random_structure(rng)], "x": doc}}]
        text = json.dumps(doc)
    else:
        alphabet = "()[]{}<>:-=., \n\tabcdefghijklmnopqrstuvwxyz0123456789\"'&*!|+\\"
        text = "".join(rng.choice(alphabet) for _ in range(rng.randint(0, 400)))
    engine = fmt = None
    if rng.random() < 0.1:
        pairs = [("postgresql", "text"), ("postgresql", "json"), ("postgresql", "xml"),
                 ("postgresql", "yaml"), ("mysql", "tree"), ("mysql", "json"), ("mariadb", "json"),
                 ("mariadb", "table"), ("duckdb", "json"), ("duckdb", "text")]
        engine, fmt = rng.choice(pairs)
    return text, engine, fmt


def one(text: str, engine: str | None, fmt: str | None) -> tuple[str, str | None]:
    """('refused' | 'read' | 'FAIL', what failed)."""
    try:
        plan = planview.load(text, engine=engine, fmt=fmt)
    except PlanParseError as exc:
        if READER_ERROR in str(exc):
            return "FAIL", f"fallback: {str(exc)[:160]}"
        return "refused", None
    except Exception as exc:  # the bug this run is looking for
        return "FAIL", f"load: {type(exc).__name__}: {_where(exc)}: {str(exc)[:120]}"
    for name in ("to_text", "to_json", "to_markdown", "to_html", "to_frame"):
        try:
            getattr(plan, name)()
        except ImportError:
            pass
        except Exception as exc:
            return "FAIL", f"{name}: {type(exc).__name__}: {_where(exc)}: {str(exc)[:120]}"
    return "read", None


def _where(exc: BaseException) -> str:
    frames = traceback.extract_tb(exc.__traceback__)
    ours = [f for f in frames if "planview" in f.filename] or frames
    last = ours[-1] if ours else None
    return f"{Path(last.filename).name}:{last.lineno}" if last else "?"


def worker(args: tuple[int, int, str | None]) -> tuple[Counter, dict[str, str], float, int]:
    seed, count, save = args
    rng = random.Random(seed)
    outcomes: Counter = Counter()
    examples: dict[str, str] = {}
    slowest = 0.0
    largest = 0
    for _ in range(count):
        text, engine, fmt = make_input(rng)
        largest = max(largest, len(text))
        start = time.perf_counter()
        outcome, failure = one(text, engine, fmt)
        slowest = max(slowest, time.perf_counter() - start)
        outcomes[outcome] += 1
        if failure:
            outcomes["FAIL " + failure] += 1
            if failure not in examples:
                examples[failure] = json.dumps({"text": text, "engine": engine, "fmt": fmt})
    return outcomes, examples, slowest, largest


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--n", type=int, default=100_000)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--save", help="folder for one input of each failure")
    args = parser.parse_args()
    chunks = 50
    per = args.n // chunks
    jobs = [(args.seed * 1000 + i, per + (1 if i < args.n % chunks else 0), args.save) for i in range(chunks)]
    start = time.perf_counter()
    total: Counter = Counter()
    examples: dict[str, str] = {}
    slowest = 0.0
    with multiprocessing.Pool(args.workers) as pool:
        for outcomes, found, slow, _ in pool.imap_unordered(worker, jobs):
            total.update(outcomes)
            examples.update({k: v for k, v in found.items() if k not in examples})
            slowest = max(slowest, slow)
    elapsed = time.perf_counter() - start
    inputs = total["read"] + total["refused"] + total["FAIL"]
    print(f"{inputs:,} inputs from {len(SEEDS)} seeds in {elapsed:.0f} s ({args.workers} workers): "
          f"{total['read']:,} read and exported, {total['refused']:,} refused with PlanParseError, "
          f"{total['FAIL']:,} failures; slowest input {slowest:.2f} s")
    for key, count in sorted(total.items(), key=lambda kv: -kv[1]):
        if key.startswith("FAIL "):
            print(f"  {count:6,}  {key[5:]}")
    if args.save and examples:
        folder = Path(args.save)
        folder.mkdir(parents=True, exist_ok=True)
        for i, (_key, value) in enumerate(sorted(examples.items())):
            (folder / f"failure_{i:03}.json").write_text(value)
        print(f"one input of each failure saved in {folder}/")


if __name__ == "__main__":
    main()
