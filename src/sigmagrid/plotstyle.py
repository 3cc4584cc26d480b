"""Shared look of the figures: colour-blind-safe colours, readable units and equations, atomic saving.

Colours follow Okabe and Ito, "Color Universal Design" (2008), a palette that stays distinct for the
common colour-vision deficiencies; maps use cividis (Nuñez, Anderton and Renslow, PLoS ONE 13 (2018)
e0199239), which is perceptually uniform and readable with deuteranopia. Figures are built on
``matplotlib.figure.Figure`` directly, never through pyplot, so no GUI backend or global state is
involved (the Agg renderer writes the files).
"""

from __future__ import annotations

import re
from pathlib import Path

import matplotlib

matplotlib.use("Agg")  # before anything imports pyplot: no display on batch nodes

import numpy as np  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter  # noqa: E402

from . import store  # noqa: E402

#: Okabe-Ito, without black (kept for the observed path) and in an order where neighbours contrast.
OKABE_ITO = {
    "orange": "#E69F00", "sky blue": "#56B4E9", "bluish green": "#009E73", "blue": "#0072B2",
    "vermillion": "#D55E00", "reddish purple": "#CC79A7", "yellow": "#F0E442",
}
SERIES = list(OKABE_ITO.values())
#: for lines on white the yellow is too faint: leave it out
LINE_SERIES = [c for name, c in OKABE_ITO.items() if name != "yellow"]
OBSERVED = "#000000"
REST = "#BBBBBB"  # "all other reactions"
LINESTYLES = ["--", "-.", (0, (1, 1.2)), (0, (5, 1.5, 1, 1.5, 1, 1.5)), (0, (8, 2)), ":"]
MAP_CMAP = "cividis"
PATH_CMAP = "viridis"

DPI = 100
FONT_SIZE = 10

_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")
_SUBSCRIPT = str.maketrans("0123456789", "₀₁₂₃₄₅₆₇₈₉")


def unit_label(units: str) -> str:
    """UDUNITS spelling to print: 'mol m-3 s-1' -> 'mol m⁻³ s⁻¹'; '1' (dimensionless) -> '1'."""
    return re.sub(r"([A-Za-z])(-?\d+)", lambda m: m.group(1) + m.group(2).translate(_SUPERSCRIPT), units)


def axis_label(name: str, units: str) -> str:
    """'name [units]', the way every axis is labelled."""
    return f"{name} [{unit_label(units)}]"


def species_label(name: str) -> str:
    """H2O2 -> H₂O₂ (digits after a letter or a closing bracket become subscripts)."""
    return re.sub(r"(?<=[A-Za-z)\]])(\d+)", lambda m: m.group(1).translate(_SUBSCRIPT), name)


def equation_label(equation: str, index: int | None = None, duplicate: bool = False) -> str:
    """A Cantera reaction equation as printed in a legend: 'R11  H + O₂ ⇌ O + OH'.

    ``index`` is the files' ``reaction`` coordinate (from 0, as Cantera counts), printed as it is
    so that a label names the value to select. Duplicates share an equation, so they are told
    apart by the number and a 'dup.' mark.
    """
    text = equation.replace("<=>", "⇌").replace("=>", "→")
    text = " ".join(species_label(tok) for tok in text.split(" "))
    prefix = f"R{index}  " if index is not None else ""
    return f"{prefix}{text}" + ("  (dup.)" if duplicate else "")


def readable_log_ticks(ax) -> None:
    """Log axes spanning less than two decades get a few labelled ticks (1-2-5, else 1-1.5-2-3-5-7).

    On short log ranges matplotlib labels minor ticks, or falls back to linear ticks, and the
    labels run into each other. Call after the limits are final.
    """
    for axis, (low, high) in ((ax.xaxis, ax.get_xlim()), (ax.yaxis, ax.get_ylim())):
        low, high = min(low, high), max(low, high)
        if axis.get_scale() != "log" or not low > 0 or np.log10(high / low) >= 2:
            continue
        decades = range(int(np.floor(np.log10(low))), int(np.ceil(np.log10(high))) + 1)
        for mantissas in ((1, 2, 5), (1, 1.5, 2, 3, 5, 7)):
            ticks = [m * 10.0 ** k for k in decades for m in mantissas if low <= m * 10.0 ** k <= high]
            if len(ticks) >= 2:
                break
        axis.set_major_locator(FixedLocator(ticks))
        axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
        axis.set_minor_formatter(NullFormatter())


def new_figure(width_px: int, height_px: int) -> Figure:
    """A figure of exactly width_px x height_px pixels with constrained layout (labels never overlap)."""
    fig = Figure(figsize=(width_px / DPI, height_px / DPI), dpi=DPI, layout="constrained")
    return fig


def save(fig: Figure, path: str | Path, title: str = "", description: str = "") -> Path:
    """Write a figure atomically: a temporary name in the same folder, then rename.

    The format follows the suffix (.png or .svg). PNG files carry the title and caption as text
    metadata, so a figure found on its own still says what it shows.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fmt = path.suffix.lstrip(".").lower()
    if fmt == "png":
        metadata = {"Title": title, "Description": description, "Software": "sigmagrid"}
    elif fmt == "svg":
        metadata = {"Title": title, "Description": description, "Date": None}
    else:
        raise ValueError(f"unsupported figure format '{fmt}'")
    with store.atomic_path(path, f".tmp-{fmt}") as tmp:
        fig.savefig(tmp, format=fmt, dpi=DPI, metadata=metadata)
    return path
