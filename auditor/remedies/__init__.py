"""Remedies: canonical-orthogonalization advice and the matrix X, the pivoted-Cholesky subset
search, the pruned basis, the ranked remedy plan, and the opt-in trial SCF.

May import: auditor.numerics, auditor.inputs, auditor.base (not auditor.diagnosis).
"""
