"""The self-contained HTML report of a run: one file, figures embedded, no network.

``write_report(RUN, OUT)`` reloads the run (:mod:`refit.report.inputs`), draws the
figures (:mod:`refit.report.assemble`), fills ``templates/report.html.j2`` (jinja2, with
autoescaping) and writes the file atomically. Figures are PNG images embedded as base64
``data:`` URIs, so the file opens anywhere, offline, and can be mailed to a co-author.
"""

from __future__ import annotations

import base64
import io
from pathlib import Path

TEMPLATE = "report.html.j2"
DPI = 150
#: shown width of a figure per inch of its size [px]: one panel about 500 px wide, sharp
#: on high-density screens and in print (the PNG holds DPI pixels per inch)
SCREEN_PX_PER_INCH = 100


def png_data_uri(fig, *, dpi: int = DPI) -> str:
    """A figure as a ``data:image/png;base64,...`` URI (no timestamp in the metadata)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None})
    return "data:image/png;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


def embed(fig) -> dict:
    """A figure as the template shows it: ``uri`` (PNG data URI) and ``width`` [px]."""
    return {"width": int(round(fig.get_figwidth() * SCREEN_PX_PER_INCH)),
            "uri": png_data_uri(fig)}


def environment():
    """The jinja2 environment: templates shipped in the package, autoescape on."""
    import jinja2

    return jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(Path(__file__).parent / "templates")),
        autoescape=True, undefined=jinja2.StrictUndefined, trim_blocks=True,
        lstrip_blocks=True, keep_trailing_newline=True)


def render(context: dict) -> str:
    """The report's HTML from its context (:func:`refit.report.context.build`)."""
    return environment().get_template(TEMPLATE).render(**context)


def report_html(run_dir, *, candidate: str | None = None, store=None,
                command: list[str] | None = None, progress=None, compare=None,
                section=None) -> str:
    """Build the report of a run folder and return its HTML.

    Parameters
    ----------
    run_dir : str or Path
        A folder written by ``refit fit --out RUN``.
    candidate : str, optional
        The candidate to report (default: the run's winner).
    store : str or Path, optional
        Where the run's data are now, if they moved.
    command : list of str, optional
        The command that makes this report (shown beside the run's own command).
    progress : callable, optional
        Called with a short description before each step.
    compare : str or Path, optional
        A folder written by ``refit compare`` (its ``comparison.csv``): its interval
        figure and table are added to the report. None: no comparison section.
    section : str or Path, optional
        A folder written by ``refit section`` (its ``section.csv``): one figure per
        section of the climate up the section. None: no section figures.
    """
    from refit.report import assemble, context
    from refit.report.inputs import load_run
    from refit.report.sources import section as source_section

    say = progress or (lambda text: None)
    say("reloading the run's data and refitting the chosen candidate")
    inp = load_run(run_dir, candidate=candidate, store=store)
    say("drawing the figures")
    figures, facts = assemble.make_figures(inp)
    for f in figures:
        f.update(embed(f.pop("figure")))
    say("drawing the per-source panel")
    sources = source_section(inp)
    if sources.get("figure") is not None:
        sources.update(embed(sources.pop("figure")))
    compared = None
    if compare is not None:
        from refit.report.comparison import section as comparison_section

        say("drawing the comparison of fits")
        compared = comparison_section(compare, inp.record["function_id"])
    strata = None
    if section is not None:
        from refit.report.section_plot import report_section

        say("drawing the climate up each section")
        strata = report_section(section)
        for f in strata["figures"]:
            f.update(embed(f.pop("figure")))
    say("writing the report")
    ctx = context.build(inp, figures, facts, report_command=command)
    return render({**ctx, "comparison": compared, "sources": sources, "strata": strata})


def write_report(run_dir, out, *, candidate: str | None = None, store=None,
                 command: list[str] | None = None, progress=None, compare=None,
                 section=None) -> Path:
    """Write the report of ``run_dir`` to ``out`` atomically; returns the path.

    The parameters are :func:`report_html`'s.
    """
    from refit._util.atomic import write_text_atomic

    html = report_html(run_dir, candidate=candidate, store=store, command=command,
                       progress=progress, compare=compare, section=section)
    out = Path(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    write_text_atomic(out, html)
    return out
