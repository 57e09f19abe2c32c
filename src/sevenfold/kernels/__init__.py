"""Numba kernels. They take plain arrays and numbers, do no I/O and know nothing of specs."""
