"""The bottom layer: errors and exit codes, element data, safe reading and writing of
files, JSON conversion.

Imports nothing else of the package (the standard library and numpy only).
"""
