"""Published soil formulas: weathering indices from oxides (``indices``) and burial
decompaction (``decompaction``). Pure functions; imports only ``refit.errors`` and
``refit._util``.
"""
