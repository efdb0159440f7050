"""Calibration and validation library of the classifier (issue 14): population, rendering, routes,
scoring and the calibration map. Used by ``benchmarks/bench_classify.py``; importable with
``benchmarks/`` on ``sys.path``.
"""
