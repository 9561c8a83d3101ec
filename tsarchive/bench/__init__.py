"""Benchmarks for tsarchive: ``python -m tsarchive.bench``.

Each run packs synthetic signals with known parameters, the repo's sample
streams and real recordings shipped inside PyPI packages, and measures in the
same run the classic codecs a user would otherwise choose
(:mod:`tsarchive.bench.baselines`), so every figure is a ratio taken under the
same conditions.  Importing this package loads nothing heavy.
"""
