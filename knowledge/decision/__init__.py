"""The decision: ``decide(case, knowledge)`` as a pipeline of named stages (``engine``), and the plans
that put numbers and clock times on it (``plans``)."""
