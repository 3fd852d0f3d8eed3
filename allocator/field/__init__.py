"""What people act on: relay changes, the work list, the visit order, the remote-schedule
rows, the switching calendar and the annual statement, all built once per allocation as a
:class:`~allocator.field.plan.FieldPlan`."""

from .plan import FieldPlan, field_plan, plan_table

__all__ = ["FieldPlan", "field_plan", "plan_table"]
