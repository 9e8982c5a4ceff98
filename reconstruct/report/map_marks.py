"""The marks every map and section carries: a north arrow, a scale bar, a key in words.

A reader who holds the printed report beside the mine plan needs to know,
on every picture without looking elsewhere, which way is north, how long a
metre is and what each line and colour stands for (common practice of
cartography, no published source cited here). These helpers draw those marks
on matplotlib axes in the project's colours (:mod:`reconstruct.report.colours`),
so that every map and section of the planner, the pick checks and the void
report draws them the same way.

The local frame of voidcube has x east and y north (docs/formats.md), so on a
plan view with x to the right north is straight up; on a vertical section the
direction the reader looks along is stated in words instead.
"""

from __future__ import annotations

import numpy as np

from reconstruct.report import colours

__all__ = ["scale_bar_length_m", "draw_north_arrow", "draw_scale_bar", "draw_key", "NORTH_LABEL"]

#: The text of the north arrow (tests find the arrow by it).
NORTH_LABEL = "N"


def scale_bar_length_m(extent_m: float) -> float:
    """A round length near a fifth of the extent: 1, 2 or 5 times a power of ten (metres)."""
    target = max(float(extent_m) / 5.0, 1e-9)
    power = 10 ** np.floor(np.log10(target))
    for step in (5, 2, 1):
        if step * power <= target:
            return float(step * power)
    return float(power)


def draw_north_arrow(axes, *, loc: tuple = (0.06, 0.70), length: float = 0.12) -> None:
    """An arrow pointing to +y (north) with the letter N at its head, in axes fractions.

    ``loc`` is the foot of the arrow. Only for plan views whose y axis points
    north (the local frame's y).
    """
    from matplotlib import patheffects

    x, y = loc
    # the text sits at the head; "<|-" puts the arrowhead at the text's end
    arrow = axes.annotate(NORTH_LABEL, xy=(x, y), xytext=(x, y + length), xycoords="axes fraction",
                  textcoords="axes fraction", ha="center", va="bottom", fontsize=9, fontweight="bold",
                  color=colours.TEXT_COLOUR,
                  arrowprops=dict(arrowstyle="<|-", color=colours.TEXT_COLOUR, lw=1.2, shrinkA=1, shrinkB=0),
                  bbox=dict(boxstyle="round,pad=0.15", fc=colours.BACKGROUND_COLOUR, ec="none", alpha=0.8))
    # a light halo keeps the arrow legible on the dark end of any colour map
    arrow.arrow_patch.set_path_effects([patheffects.withStroke(linewidth=3.5, foreground=colours.BACKGROUND_COLOUR)])


def draw_scale_bar(axes, extent_m: float, *, loc: str = "lower right") -> float:
    """A scale bar of a round length (:func:`scale_bar_length_m`) in data units (metres).

    The axes must be drawn at equal aspect for the bar to hold in both
    directions. Returns the bar's length in metres.
    """
    from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

    bar = scale_bar_length_m(extent_m)
    axes.add_artist(AnchoredSizeBar(axes.transData, bar, f"{bar:g} m", loc=loc, pad=0.4,
                                    color=colours.TEXT_COLOUR, frameon=True, size_vertical=0))
    return bar


def draw_key(target, entries, *, loc: str = "upper right", fontsize: int = 7) -> None:
    """A key (legend) listing only the entries given, each ``(handle, words)``.

    ``target`` is matplotlib axes or a figure (with a constrained layout, ``loc``
    may then be ``"outside lower center"``: the key below the pictures).
    Callers pass only what the picture shows, so the key never names a thing
    that is not drawn; with no entries, no key is drawn.
    """
    entries = list(entries)
    if not entries:
        return
    handles, words = zip(*entries)
    target.legend(handles, words, loc=loc, fontsize=fontsize, framealpha=0.9, ncols=min(2, len(entries)))
