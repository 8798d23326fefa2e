"""Figures and the self-contained HTML report of a fit run.

``write_report(RUN, "reports/name.html")`` is what ``refit report`` calls;
:mod:`refit.report.figures` holds one function per figure (each returns a matplotlib
Figure drawn from numbers it is given), :mod:`refit.report.diagnostics` the numbers behind
them, :mod:`refit.report.style` the look. Heavy libraries load on first use.
"""

from __future__ import annotations

__all__ = ["load_run", "report_html", "write_report"]


def __getattr__(name: str):
    if name in ("report_html", "write_report"):
        from refit.report import html

        return getattr(html, name)
    if name == "load_run":
        from refit.report.inputs import load_run

        return load_run
    raise AttributeError(f"module 'refit.report' has no attribute {name!r}")
