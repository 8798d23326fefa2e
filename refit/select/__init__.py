"""Select: the recipe, the subset of the calibration set a fit is made on, and its rebuild.

``recipe`` reads and checks recipe files (TOML); ``subsets`` holds the filter grammar
(equals, one of, range) and the counts a subset keeps; ``schemes`` the cross-validation
scheme names (with aliases) that recipes and splitters share; ``dataset`` is the one
rebuild of a data set, from a recipe or from a coefficient record's provenance
(:func:`refit.select.dataset.dataset_from_recipe`,
:func:`refit.select.dataset.dataset_from_record`); ``scaffold`` writes the commented first
recipe of ``refit init``. Imports curate and models, never
validate; ``subsets`` imports no other select module, ``recipe`` only ``subsets`` and
``schemes``.
"""
