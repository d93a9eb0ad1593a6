"""planview: review query plans, estimated against actual rows, operator by operator."""

from __future__ import annotations

from .errors import PlanParseError, PlanviewError, ProbeError
from .magic import load_ipython_extension, review  # noqa: F401  (the notebook entry points)
from .model import Condition, Finding, PlanNode
from .plan import Plan, load

__all__ = ["Condition", "Finding", "Plan", "PlanNode", "PlanParseError", "PlanviewError",
           "ProbeError", "load"]
__version__ = "0.1.0"
