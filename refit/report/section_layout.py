"""Which fits go into which panel and page of a section figure, and in what colour.

A panel holds at most :data:`FITS_PER_PANEL` fits of one climate quantity, so each fit
keeps a colour of its own from a short colour-blind-safe list and the legend stays
short; more fits of one quantity are drawn as small multiples: panels side by side on
one level (or age) axis and one x range per quantity, at most :data:`PANELS_PER_PAGE`
to a figure, more figures (pages) after that. The plan depends on the whole table, not
on one section, so a fit keeps its panel, colour and marker in every section.

Two layouts:

* **joint** (at most :data:`FITS_PER_PANEL` fits in the whole table): one panel per
  quantity and one legend under them all, every fit its own colour;
* **split** (more fits): a legend under each panel naming its fits (colours repeat
  from panel to panel, never within one), and one legend for the line styles under
  the figure.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from refit.report import style

#: fits drawn in one panel at most: five colours that stay distinguishable under the
#: common colour-vision deficiencies (Okabe-Ito; five lines a panel is common practice)
FITS_PER_PANEL = 5
#: panels side by side in one figure at most (more go to further pages)
PANELS_PER_PAGE = 4
#: one colour per fit of a panel (Okabe-Ito without black and yellow, which are kept
#: for text and are faint on white)
PALETTE = (style.BLUE, style.VERMILLION, style.BLUISH_GREEN, style.REDDISH_PURPLE,
           style.ORANGE)
#: markers in the same order (the diamond is kept for posteriors)
MARKERS = ("o", "s", "^", "v", "P")
POSTERIOR = "posterior"


@dataclass(frozen=True)
class Panel:
    """One panel: a climate quantity and the fits drawn in it.

    ``first`` is the 1-based number of its first fit among the ``total`` fits of the
    quantity (the title says "fits 6-10 of 20").
    """

    response: str
    unit: str
    fits: tuple
    first: int = 1
    total: int = 1

    @property
    def span(self) -> str:
        """``"6-10"`` (or ``"6"`` for one fit)."""
        last = self.first + len(self.fits) - 1
        return f"{self.first}" if last == self.first else f"{self.first}-{last}"


def drawable(table, axis: str = "level_m"):
    """Rows of the section table that can be drawn: a finite estimate and a finite
    level (or age)."""
    y = table["age" if axis == "age" else "level_m"].to_numpy(float)
    return table[np.isfinite(y) & np.isfinite(table["estimate"].to_numpy(float))]


def _quantity_fits(table) -> dict:
    """{(response, unit): [fits in table order]} of the rows with an estimate."""
    t = table[np.isfinite(table["estimate"].to_numpy(float))]
    out: dict = {}
    for (resp, unit, fit) in zip(t["response"], t["unit"], t["fit"]):
        fits = out.setdefault((str(resp), str(unit)), [])
        if fit not in fits:
            fits.append(fit)
    return out


def is_split(table, per_panel: int = FITS_PER_PANEL) -> bool:
    """True when the table has more fits than one panel holds (the split layout)."""
    t = table[np.isfinite(table["estimate"].to_numpy(float))]
    return t["fit"].nunique() > per_panel


def panels(table, section: str, axis: str = "level_m", *,
           per_panel: int = FITS_PER_PANEL) -> list[Panel]:
    """The panels of one section, in the order of the quantities in the section: the
    fits of each quantity cut into runs of at most ``per_panel`` (fixed by the whole
    table, so a fit has the same panel in every section); a panel is left out where
    none of its fits has a drawable row in this section, a fit where it has none."""
    t = drawable(table[table["section"] == section], axis)
    present = set(t["fit"])
    order = list(dict.fromkeys(zip(t["response"].astype(str), t["unit"].astype(str))))
    every = _quantity_fits(table)
    out = []
    for key in order:
        fits = every[key]
        for i in range(0, len(fits), per_panel):
            run = tuple(f for f in fits[i:i + per_panel] if f in present)
            if run:
                out.append(Panel(key[0], key[1], run, first=i + 1, total=len(fits)))
    return out


def pages(section_panels: list, split: bool,
          per_page: int = PANELS_PER_PAGE) -> list[tuple]:
    """The panels cut into figures (pages) of at most ``per_page`` panels; in the joint
    layout every quantity's one panel is on one figure, as many as there are."""
    if not split:
        return [tuple(section_panels)] if section_panels else []
    return [tuple(section_panels[i:i + per_page])
            for i in range(0, len(section_panels), per_page)]


def colours(table, *, per_panel: int = FITS_PER_PANEL) -> dict:
    """{fit: (colour, marker)}: in the joint layout by the fit's place in the table, in
    the split layout by its place in its panel (never two fits of one panel alike); a
    posterior is drawn with a diamond."""
    post = set(table.loc[table["interval_kind"] == POSTERIOR, "fit"]) \
        if "interval_kind" in table else set()
    if is_split(table, per_panel):
        places = {}
        for fits in _quantity_fits(table).values():
            places.update({f: i % per_panel for i, f in enumerate(fits)})
    else:
        places = {f: i for i, f in enumerate(dict.fromkeys(table["fit"]))}
    return {f: (PALETTE[i % len(PALETTE)], "D" if f in post else MARKERS[i % len(MARKERS)])
            for f, i in places.items()}


def _n(count: int, word: str) -> str:
    return f"{count} {word}{'' if count == 1 else 's'}"


def describe(page: tuple, notation=None) -> str:
    """What one figure holds, in words, e.g. ``"20 fits in 4 panels (MAP: fits 1-5,
    6-10, 11-15, 16-20 of 20, a panel each)"`` or ``"2 fits in 1 panel (MAP: 2)"``;
    ``notation`` names a quantity (default its column name)."""
    name = notation or (lambda r: r)
    parts: dict = {}
    for p in page:
        parts.setdefault(p.response, []).append(p)
    head = f"{_n(sum(len(p.fits) for p in page), 'fit')} in {_n(len(page), 'panel')}"
    if all(len(ps) == 1 and ps[0].total == len(ps[0].fits) for ps in parts.values()):
        return head + " (" + "; ".join(f"{name(r)}: {len(ps[0].fits)}"
                                       for r, ps in parts.items()) + ")"
    return head + " (" + "; ".join(
        f"{name(r)}: fits " + ", ".join(p.span for p in ps) + f" of {ps[0].total}"
        for r, ps in parts.items()) + ", a panel each)"
