"""Figure of the floor oxygen on the 2D field, coloured against the cells' critical oxygen."""

from __future__ import annotations

import numpy as np

__all__ = ["oxygen_map_figure", "OXYGEN_COLOURS"]

#: Colours of the oxygen bands, low to high (our own palette): below the critical value,
#: within twice it, then four bands up to the highest floor value.
OXYGEN_COLOURS = ("#7f0000", "#e6550d", "#fdd49e", "#c6dbef", "#6baed6", "#08519c")


def _bands(critical: float | None, top: float) -> np.ndarray:
    """Inner band edges [mol/m^3]: the critical value and twice it, then even steps to the top."""
    if critical is None or not 2.0 * critical < top:
        return np.linspace(0.0, top, 7)[1:-1]
    return np.concatenate([[critical, 2.0 * critical], np.linspace(2.0 * critical, top, 5)[1:-1]])


def oxygen_map_figure(transport, zoom=None, *, width: float = 7.5):
    """The floor oxygen of every triangle on the chip, and a close-up.

    Parameters
    ----------
    transport : chipflow.transport.field.FieldTransport
        The oxygen on the field mesh (its ``floor`` per triangle [mol/m^3]).
    zoom : (float, float, float) or None
        Centre x, y and half-size [m] of a close-up panel; none without.
    width : float
        Figure width [in].

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.colors import BoundaryNorm, ListedColormap

    from chipflow.report.field_figure import map_panels

    mesh = transport.mesh
    floor = np.asarray(transport.floor, float)
    top = max(float(np.nanmax(floor, initial=0.0)), 1e-30)
    edges = _bands(transport.critical, top * (1 + 1e-9))
    norm = BoundaryNorm(np.concatenate([[0.0], edges, [top * (1 + 1e-9)]]), len(OXYGEN_COLOURS))
    cmap = ListedColormap(OXYGEN_COLOURS)
    fig, axes, art = map_panels(mesh, floor, cmap, norm, zoom, width)
    bar = fig.colorbar(art, ax=list(axes), shrink=0.9, spacing="uniform")
    bar.set_ticks(edges)
    bar.set_ticklabels([f"{e:.3g}" for e in edges])
    label = "floor oxygen [mol/m^3]"
    if transport.critical is not None:
        label += f"\ncritical {transport.critical:.3g}: below it dark red"
    bar.set_label(label, fontsize=8)
    return fig
