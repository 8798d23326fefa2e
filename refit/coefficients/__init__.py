"""Coefficient files: the one reader and validator, the numpy-only evaluator, the builder.

``format`` reads, validates and hashes a file (the one reader every command uses) and
gives ``Equation``; ``evaluate`` evaluates an equation and its interval with numpy only;
``build`` turns a ``Fit`` into a record (the producer). ``load(path).predict(values)``
evaluates a file without pandas, statsmodels or scikit-learn.
"""

from refit.coefficients.format import (  # noqa: F401  (the public names of the format)
    CANDIDATE_VERSION, CAUTION, DEFAULT_VARIANT, SCHEMA_VERSION, SHEET_SCHEMA, VARIANT_NAME,
    Equation, Prediction, canonical_bytes,
    check_content_hash, check_schema, check_schema_version, content_sha256, dumps, json_path,
    load, parse_bytes, plain, read_bytes, read_file, read_record, recorded_sheet, schema,
    schema_problems, schema_version_for, validate, variant_name, variant_of, with_hash, write_record,
)


_BUILD = ("fit_record", "interval_record", "column_units")


def __getattr__(name: str):
    # the producer (Fit -> record) imports the fitting stack: loaded only when asked for
    if name in _BUILD:
        from refit.coefficients import build

        return getattr(build, name)
    raise AttributeError(f"module 'refit.coefficients' has no attribute {name!r}")
