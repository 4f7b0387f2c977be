"""Pure numerics on floats: no I/O, no model types.

Each function states its formula and where the formula is published.
"""
