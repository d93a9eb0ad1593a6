"""A CI gate against a stored baseline: fail only on an origin that is new or has got worse.

An origin is known by its query (the normalised fingerprint of its query text, or the plan
file's path when the plan carries no query text), its operator and relation, and its rank
among origins of that operator on that relation in the query (the first, the second...), so a
plan whose shape moves around an origin still finds it. When a log holds the same query many
times, its worst q-error is the one kept. The baseline is a small JSON file meant to be
committed beside the tests.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass, field
from typing import Any

from ..errors import PlanviewError

BASELINE_VERSION = 1


def _origins(path, threshold: float, on_unreadable=None) -> tuple[dict[str, dict[str, Any]], int]:
    from .batch import run_batch

    found: dict[str, dict[str, Any]] = {}
    plans = 0
    for chunk in run_batch(path, threshold=threshold, progress=False):
        plans += chunk.entries
        for item in chunk.unreadable:
            if on_unreadable:
                on_unreadable(item)
        seen: dict[tuple, int] = {}
        for row in chunk.rows():
            if row["row"] == "query":
                seen = {}
                continue
            if not row["origin"]:
                continue
            query = row["fingerprint"] or row["source"]
            what = (query, row["operator"], row["relation"])
            rank = seen.get(what, 0)
            seen[what] = rank + 1
            where = f"{row['operator']} on {row['relation']}" if row["relation"] else row["operator"]
            key = f"{query} | {where} | {rank + 1}"
            q = row["own_q_error"] or row["q_error"] or 1.0
            if key not in found or q > found[key]["q_error"]:
                found[key] = {"q_error": q, "cause": row["cause"], "where": where,
                              "seen_in": f"{row['source']}:{row['line']}" if row["line"] and row["line"] > 1
                              else row["source"], "columns": row["columns"], "direction": row["direction"]}
    return found, plans


def update_baseline(plans, baseline_path, *, threshold: float = 10.0, on_unreadable=None) -> dict:
    origins, count = _origins(plans, threshold, on_unreadable)
    baseline = {"planview_baseline": BASELINE_VERSION, "threshold": threshold, "plans": count,
                "origins": dict(sorted(origins.items()))}
    with open(baseline_path, "w", encoding="utf-8") as handle:
        json.dump(baseline, handle, indent=2, ensure_ascii=False)
        handle.write("\n")
    return baseline


def read_baseline(baseline_path) -> dict:
    try:
        with open(baseline_path, encoding="utf-8") as handle:
            data = json.load(handle)
    except FileNotFoundError:
        raise PlanviewError(f"no baseline at {os.fspath(baseline_path)}; write one with --update-baseline") from None
    except (OSError, ValueError) as exc:
        raise PlanviewError(f"cannot read the baseline {os.fspath(baseline_path)}: {exc}") from None
    if not isinstance(data, dict) or data.get("planview_baseline") != BASELINE_VERSION \
            or not isinstance(data.get("origins"), dict):
        raise PlanviewError(f"{os.fspath(baseline_path)} is not a planview baseline (key "
                            "\"planview_baseline\" or \"origins\" missing or wrong)")
    for key, value in data["origins"].items():
        if not isinstance(value, dict) or not isinstance(value.get("q_error"), (int, float)):
            raise PlanviewError(f"{os.fspath(baseline_path)}: origin {key!r} has no numeric \"q_error\"")
    return data


@dataclass
class GateVerdict:
    new: list[tuple[str, dict]] = field(default_factory=list)
    worse: list[tuple[str, dict, float]] = field(default_factory=list)
    better: list[tuple[str, dict, float]] = field(default_factory=list)
    gone: list[str] = field(default_factory=list)
    held: int = 0
    plans: int = 0

    @property
    def failed(self) -> bool:
        return bool(self.new or self.worse)

    def to_text(self) -> str:
        lines = []
        for key, now in self.new:
            lines.append(f"new origin: {now['where']} x{now['q_error']:,.1f} ({now['cause'] or 'cause unknown'}) "
                         f"in {now['seen_in']}  [{key}]")
        for key, now, was in self.worse:
            lines.append(f"worse: {now['where']} x{was:,.1f} -> x{now['q_error']:,.1f} in {now['seen_in']}  [{key}]")
        for key, now, was in self.better:
            lines.append(f"better: {now['where']} x{was:,.1f} -> x{now['q_error']:,.1f}  [{key}]")
        for key in self.gone:
            lines.append(f"gone: {key}")
        lines.append(f"gate {'FAILED' if self.failed else 'passed'}: {len(self.new)} new, {len(self.worse)} worse, "
                     f"{len(self.better)} better, {self.held} as before, {len(self.gone)} gone, "
                     f"in {self.plans} plan(s)")
        from ..inert import visible

        return "\n".join(visible(line) for line in lines) + "\n"


def gate(plans, baseline_path, *, threshold: float = 10.0, worse_by: float = 2.0, on_unreadable=None) -> GateVerdict:
    if not worse_by > 1:
        raise PlanviewError(f"--worse-by must be above 1, got {worse_by}")
    baseline = read_baseline(baseline_path)["origins"]
    now, count = _origins(plans, threshold, on_unreadable)
    verdict = GateVerdict(plans=count)
    for key, found in now.items():
        was = baseline.get(key)
        if was is None:
            verdict.new.append((key, found))
        elif found["q_error"] >= was["q_error"] * worse_by:
            verdict.worse.append((key, found, was["q_error"]))
        elif found["q_error"] * worse_by <= was["q_error"]:
            verdict.better.append((key, found, was["q_error"]))
        else:
            verdict.held += 1
    verdict.gone = sorted(set(baseline) - set(now))
    return verdict
