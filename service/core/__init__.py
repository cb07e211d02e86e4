"""The numerics core: value models, order statistics and auction rules.

Nothing in this package imports Flask or knows about HTTP.
"""
