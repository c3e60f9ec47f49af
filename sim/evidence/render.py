"""One renderer per analysis: what a reader sees of a result, wherever it is shown.

A :class:`Renderer` turns an analysis's result object (:mod:`sim.core.records`) into its terminal text, its JSON
document and its figures, and writes its part of an evidence bundle. A command (``supergame thresholds``,
``simulate``, ...) prints ``console(result)`` or ``as_json(result)`` and saves ``figures(result)`` with ``--plot``;
the bundle of a run folder draws the same figures from the result stored with each cell. So the figure a command
plots is the figure the bundle shows.

Renderers are found by kind name in :data:`RENDERERS` (``"module:attribute"``, imported on first use); a plugin kind
registers its own with :func:`register_renderer` or keeps the older ``Kind.report`` hook.
"""

from __future__ import annotations

import importlib
import io
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sim.core.errors import InputError

__all__ = [
    "RENDERERS",
    "Drawn",
    "Renderer",
    "output_dir",
    "pyplot",
    "register_renderer",
    "renderer_for",
    "write_figures",
]


def pyplot():
    """matplotlib's pyplot with the Agg backend (no display needed); imported on first use.

    Returns
    -------
    module
        ``matplotlib.pyplot``.
    """
    import matplotlib  # heavy: only when a figure is drawn

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


@dataclass
class Drawn:
    """A figure drawn for a reader.

    Attributes
    ----------
    name : str
        File stem (``price-path`` -> ``price-path.png``).
    figure : matplotlib.figure.Figure
    caption : str
        What the figure shows and what to read from it.
    """

    name: str
    figure: Any
    caption: str


@dataclass(frozen=True)
class Renderer:
    """How one analysis is shown.

    Attributes
    ----------
    console : callable
        ``console(result) -> str``: the terminal report, headline answer first.
    as_json : callable
        ``as_json(result) -> dict``: the ``--json`` document.
    figures : callable, optional
        ``figures(result) -> list of Drawn``.
    bundle : callable, optional
        ``bundle(run, bundle) -> list of str or None``: the analysis's own account of a run folder in its evidence
        bundle, read from the stored cells (see :func:`sim.evidence.report.write_report`).
    headline : callable, optional
        ``headline(result) -> str``: the answer in one or two sentences (:mod:`sim.evidence.answers`), the first
        line of ``console`` and the first sentence of a single-cell bundle's answer.
    """

    console: Callable[[Any], str]
    as_json: Callable[[Any], dict]
    figures: Callable[[Any], list] | None = None
    bundle: Callable[[Any, Any], list | None] | None = None
    headline: Callable[[Any], str] | None = None


#: kind name -> "module:attribute" of its :class:`Renderer` (imported on first use) or the Renderer itself
RENDERERS: dict = {
    "thresholds": "sim.evidence.thresholds:RENDERER",
    "assess": "sim.evidence.assess:RENDERER",
    "learn": "sim.evidence.learn:RENDERER",
    "simulate": "sim.evidence.simulate:RENDERER",
    "tournament": "sim.evidence.tournament:RENDERER",
    "capacity": "sim.evidence.capacity:RENDERER",
    "contact_simulation": "sim.evidence.contact_simulation:RENDERER",
}


def register_renderer(kind: str, renderer: Renderer) -> None:
    """Show the experiment kind ``kind`` with ``renderer``.

    Parameters
    ----------
    kind : str
        The kind's name (``experiment.kind``).
    renderer : Renderer
    """
    if not isinstance(renderer, Renderer):
        raise TypeError(f"expected a sim.evidence.render.Renderer, got {renderer!r}")
    RENDERERS[str(kind)] = renderer


def renderer_for(kind: str) -> Renderer | None:
    """The renderer of the kind named ``kind``, or None.

    Parameters
    ----------
    kind : str

    Returns
    -------
    Renderer or None
    """
    r = RENDERERS.get(kind)
    if isinstance(r, str):
        mod, _, attr = r.partition(":")
        r = RENDERERS[kind] = getattr(importlib.import_module(mod), attr)
    return r


def output_dir(path, key: str = "plot") -> Path:
    """The folder ``path``, created if needed.

    Parameters
    ----------
    path : path-like
    key : str
        Names the setting in errors (the command maps it to its flag).

    Returns
    -------
    Path
    """
    d = Path(path)
    if d.exists() and not d.is_dir():
        raise InputError(key, f"{path} exists and is not a directory")
    try:
        d.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(key, f"cannot create the directory {path} ({exc.strerror})") from None
    return d


#: resolution of every PNG figure (print at the width of an A4 text column)
DPI = 200


def figure_bytes(fig, fmt: str) -> bytes:
    """A figure as PNG or PDF bytes, without the time stamps and tool names that would make two drawings of the
    same figure differ.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    fmt : {"png", "pdf"}

    Returns
    -------
    bytes
    """
    buf = io.BytesIO()
    if fmt == "png":
        fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None})
    else:
        fig.savefig(buf, format="pdf", metadata={"CreationDate": None, "ModDate": None, "Producer": None,
                                                 "Creator": None})
    return buf.getvalue()


def write_figures(drawn: list, directory, key: str = "plot") -> list[Path]:
    """Save figures as PNG into ``directory`` and close them.

    Parameters
    ----------
    drawn : list of Drawn
    directory : path-like
    key : str
        Names the setting in errors.

    Returns
    -------
    list of Path
        The files written.
    """
    d = output_dir(directory, key)
    plt = pyplot()
    out = []
    for fig in drawn:
        p = d / f"{fig.name}.png"
        p.write_bytes(figure_bytes(fig.figure, "png"))
        plt.close(fig.figure)
        out.append(p)
    return out
