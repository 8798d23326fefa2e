"""Small shared utilities: atomic writes and hashes, thread blocks, flag codes, order
statistics and where the shipped files live.

Imports nothing else of refit but ``refit.errors``; every stage may use it.
"""
