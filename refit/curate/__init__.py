"""Curate: read incoming tables, check them and keep the calibration store.

Owns reading tables of every kind (``tables``: csv, xlsx, parquet, decimal commas,
headers, workbooks), units and column synonyms (``units``), the schema and controlled
vocabularies (``schema``, ``vocabularies``), cell parsing and the problems table
(``cells``, ``problems``), the checks (``rules``: the report and the rules both table
kinds share; ``checks``, ``sequences``; fossil tables in ``fossils``) and the versioned
calibration store (``store``, its staged commit in ``store_commit``, duplicate detection
in ``duplicates``).

Public names: ``read_table``, ``check_file``, ``check_frame``, ``CheckReport``,
``admit``, ``open_store``, ``check_fossil_file``. Imports nothing from the later stages.
"""
