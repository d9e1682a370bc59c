"""Numerics on the overlap matrix: S and its function table (pyscf), the spectrum on the
dense and the factored (large-system) path, pivoted Cholesky, and the memory guard.

May import: auditor.inputs, auditor.base.
"""
