"""The allocation planner: ``Year + Study → assignment`` (see :mod:`.solve`)."""

from .solve import PlanOutcome, plan_allocation

__all__ = ["PlanOutcome", "plan_allocation"]
