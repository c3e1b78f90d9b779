"""Model problems: random fields (FFT-MA Gaussian, lognormal), channels and layers, from fixed seeds.

Shared by the demo (`upscale.demo`), the tests and the benchmarks.
"""
