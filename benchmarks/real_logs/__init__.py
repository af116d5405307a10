"""A benchmark of the surrogate pick on real black boxes (not synthetic functions).

``problems.py`` defines the black boxes, ``logs.py`` logs them as campaigns of a simple
optimizer (cached in ``benchmarks/results/real_logs_cache.json``), ``measure.py`` fits
every candidate on the past campaigns and scores it on fresh campaigns (the truth), and
cross-validates it under each validation scheme.  ``python -m benchmarks.real_logs``
runs it; ``benchmarks/real_logs_score_choice.py`` tabulates which cross-validated score
best predicts next-campaign quality.
"""
