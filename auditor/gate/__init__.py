"""Running many inputs: check's loop over files, gate's parallel run (items, worker processes
or a Dask cluster, the result cache, the policy file and the baseline), and the demo.

May import: auditor.report, auditor.pipeline and everything below them. auditor.gate.workers uses
the standard library only (the command line imports it before anything heavy).
"""
