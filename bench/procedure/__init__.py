"""Procedures: the YAML schema and its validation, typed plans, operators and the runner.

``load_plan(path)`` validates a procedure before any instrument is touched; the runner
(:mod:`bench.procedure.runner`) executes a plan step by step into a run folder.
"""

from bench.procedure.plan import Plan, Step, load_plan, plan_from_text

__all__ = ["Plan", "Step", "load_plan", "plan_from_text"]
