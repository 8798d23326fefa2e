"""Select: the recipe and the subset of the calibration set a fit is made on.

``recipe`` reads and checks recipe files (TOML); ``subsets`` holds the filter grammar
(equals, one of, range) and the counts a subset keeps. Imports curate and models, never
validate.
"""
