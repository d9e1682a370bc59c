"""The audit pipeline: one geometry in one basis, from S to the one result object that every writer reads.

May import: auditor.remedies, auditor.diagnosis, auditor.numerics, auditor.inputs, auditor.base.
"""
