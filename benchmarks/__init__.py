"""National-scale benchmarks of closecall against the baselines a user would otherwise run.

Not part of the test run: ``python -m benchmarks.run --cases 850000`` (see docs/performance.md).
"""
