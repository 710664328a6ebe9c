"""Cash replenishment planner: forecasts, visit schedules and cost scenarios for cash machines."""

__version__ = "0.1.0"

__all__ = ["__version__"]
