"""arlib: vector autoregressions, their responses, decompositions, causality tests and connectedness.

Pure computation over numpy arrays; no I/O.
"""
