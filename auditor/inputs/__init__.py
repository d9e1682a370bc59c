"""Inputs: geometry files to Molecule, basis names and files to shells, and the
pruned-basis document read back.

May import: auditor.base.
"""
