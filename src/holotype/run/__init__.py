"""Running analyses: a plan (the dependency graph of analyses) goes to a runner, results come back.

Comparison happens after, from the results (compare/runs.py); nothing here judges outputs.
"""
