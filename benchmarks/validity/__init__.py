"""Validation bench: ethoscribe's defaults and a plain reference pipeline scored the same way on
several independent sources (simulated, real recordings, published segmentation series).

Run ``python -m benchmarks.validity --out results/validity``; see ``benchmarks/README.md``.
"""
