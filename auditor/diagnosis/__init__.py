"""Diagnosis: findings (geometry defects, duplicate functions, crowded diffuse shells, the
near-singular spectrum), the causes (where the near-null space sits) and the verdict.

May import: auditor.numerics, auditor.inputs, auditor.base.
"""
