"""planview: review query plans, estimated against actual rows, operator by operator."""

from __future__ import annotations

from .errors import PlanParseError, PlanviewError, ProbeError
from .magic import load_ipython_extension, review  # noqa: F401  (the notebook entry points)
from .model import Condition, Finding, PlanNode
from .plan import Plan, load


def batch(path, **options):
    """Every plan in a server log or a folder as one pandas DataFrame (see `planview.fleet.batch`)."""
    from .fleet.batch import batch as _batch

    return _batch(path, **options)


def compare(before, after, **options):
    """Two plans of the same query compared node by node (see `planview.fleet.compare`)."""
    from .fleet.compare import compare as _compare

    return _compare(before, after, **options)

__all__ = ["Condition", "Finding", "Plan", "PlanNode", "PlanParseError", "PlanviewError",
           "ProbeError", "batch", "compare", "load"]
__version__ = "0.1.0"
