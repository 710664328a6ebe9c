"""Cash replenishment planner: forecasts, visit schedules and cost scenarios for cash machines.

``planner.plan_scenario(path_or_scenario, **overrides)`` runs the whole pipeline and returns a
:class:`planner.pipeline.PlanRun`; ``planner.load_scenario(path)`` only loads and validates.
"""

__version__ = "0.1.0"

__all__ = ["__version__", "load_scenario", "plan_scenario", "PlanOptions"]


def __getattr__(name: str):
    # imported on first use so that `planner --version` and `import planner` stay fast
    if name in ("plan_scenario", "PlanOptions"):
        from planner import pipeline

        return getattr(pipeline, name)
    if name == "load_scenario":
        from planner.scenario import load_scenario

        return load_scenario
    raise AttributeError(f"module 'planner' has no attribute {name!r}")
