"""Writers: each reads an AuditResult (or its JSON dictionary) and renders one format; none
recomputes. Also the summary-row model that the gate, the terminal and the set overview share.

May import: auditor.pipeline and everything below it.
"""
