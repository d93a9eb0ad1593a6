"""Diagnosis: what the statistics probably missed at each origin (filled in by its rules)."""

from __future__ import annotations


def diagnose(plan) -> None:
    """Rank the findings; the cause rules come in their own modules."""
    for rank, finding in enumerate(plan.findings, 1):
        finding.rank = rank
