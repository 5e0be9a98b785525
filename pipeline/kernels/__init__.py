"""Compiled kernels: pure functions of float64 arrays writing into a preallocated `out`.

No pandas, units, configuration, logging or files here; `lagfield.engine` validates shapes,
allocates, chunks and chooses the kernel. Each kernel has a slow NumPy twin in
tests/reference.py that the tests compare it with.
"""
