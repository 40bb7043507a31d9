"""Reference samplers used only by ``benchmarks/fit_benchmark.py`` (not part of the package)."""
