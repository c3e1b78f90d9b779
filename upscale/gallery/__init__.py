"""Model problems: random fields (FFT-MA Gaussian, lognormal), channels and layers, from fixed seeds.

``fields`` generates correlated random fields; ``problems`` holds the model
problems with a known answer (layers, checkerboards, uncorrelated lognormal
fields, channels, lenses, a well in the centre of a square) and that answer. Shared by the demo
(`upscale.demo`), the tests and the benchmarks.
"""
