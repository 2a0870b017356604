"""Small helpers shared by the study modules."""

from __future__ import annotations

from ..planning import Plan

__all__ = ["is_measured_plan"]


def is_measured_plan(plan: Plan) -> bool:
    """True when `plan`'s couplings came from measured impulse responses (its kernel's name says so)."""
    return plan.kernel_name.lower().startswith("measured")
