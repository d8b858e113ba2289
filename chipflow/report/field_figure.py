"""Figure of the field's floor wall shear, coloured against the cells' shear window."""

from __future__ import annotations

import numpy as np

__all__ = ["field_shear_figure", "map_panels", "BAND_COLOURS"]

#: Colours of the shear bands, low to high (our own palette): far below, below, in the lower
#: and upper half of the window, above, far above.
BAND_COLOURS = ("#3b4cc0", "#8db0fe", "#5aae61", "#1b7837", "#f4a582", "#b2182b")


def _bands(window: tuple[float, float] | None, shear: np.ndarray) -> np.ndarray:
    if window is None:
        top = float(np.nanpercentile(shear, 99)) or 1.0
        return np.linspace(0.0, top, 7)[1:-1]
    lo, hi = window
    return np.array([0.5 * lo, lo, 0.5 * (lo + hi), hi, 1.5 * hi])


def map_panels(mesh, values, cmap, norm, zoom=None, width: float = 7.5):
    """A figure of one value per triangle of ``mesh`` on the chip [mm], and a close-up.

    ``zoom`` is the centre x, y and half-size [m] of the close-up (none without); the main
    panel marks where it lies. The figure lays itself out (matplotlib's constrained layout),
    so titles, axis labels and a colour bar added to all axes do not overlap or get cut.
    Returns the figure, its axes and the drawn collection of the first (for the colour bar).
    """
    from matplotlib.figure import Figure
    from matplotlib.patches import Rectangle

    panels = 2 if zoom is not None else 1
    fig = Figure(figsize=(width, 2.9 * panels), layout="constrained")
    axes = fig.subplots(panels, 1, squeeze=False)[:, 0]
    mm = 1e3
    x, y = mesh.points[:, 0] * mm, mesh.points[:, 1] * mm
    art = None
    for k, ax in enumerate(axes):
        tris, colours = mesh.triangles, values
        if k == 1:  # the close-up draws only the triangles that can show in it
            cx, cy, half = zoom
            corner = mesh.points[tris]
            low, high = corner.min(axis=1), corner.max(axis=1)
            near = np.all((high >= [cx - half, cy - half]) & (low <= [cx + half, cy + half]), 1)
            tris, colours = tris[near], values[near]
        drawn = ax.tripcolor(x, y, tris, facecolors=colours, cmap=cmap, norm=norm, rasterized=True)
        art = drawn if art is None else art
        ax.set_aspect("equal")
        ax.set_xlabel("x [mm]", fontsize=8)
        ax.set_ylabel("y [mm]", fontsize=8)
        ax.tick_params(labelsize=7)
        if k == 1:
            cx, cy, half = zoom
            ax.set_xlim((cx - half) * mm, (cx + half) * mm)
            ax.set_ylim((cy - half) * mm, (cy + half) * mm)
            ax.set_title("close-up (the box in the panel above)", fontsize=8)
            axes[0].add_patch(
                Rectangle(
                    ((cx - half) * mm, (cy - half) * mm),
                    2 * half * mm,
                    2 * half * mm,
                    fill=False,
                    edgecolor="black",
                    lw=0.8,
                )
            )
    return fig, axes, art


def field_shear_figure(solution, window: tuple[float, float] | None, zoom=None, *, width=7.5):
    """Floor shear of every triangle on the chip, and a close-up.

    Parameters
    ----------
    solution : FieldSolution
    window : (float, float) or None
        The cells' floor shear window [Pa]; colours mark below, inside and above it.
    zoom : (float, float, float) or None
        Centre x, y and half-size [m] of the close-up panel (e.g. a bed end); none without.
    width : float
        Figure width [in].

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.colors import BoundaryNorm, ListedColormap

    mesh = solution.mesh
    shear = solution.floor_shear
    edges = _bands(window, shear)
    cmap = ListedColormap(BAND_COLOURS)
    top = max(float(np.nanmax(shear, initial=0.0)), 2.0 * float(edges[-1]))
    norm = BoundaryNorm(np.concatenate([[0.0], edges, [top]]), cmap.N)
    fig, axes, art = map_panels(mesh, shear, cmap, norm, zoom, width)
    bar = fig.colorbar(art, ax=list(axes), shrink=0.9, spacing="uniform")
    bar.set_ticks(edges)
    bar.set_ticklabels([f"{e:.3g}" for e in edges])
    bar.ax.tick_params(labelsize=7)
    label = "floor wall shear [Pa]"
    if window is not None:
        label += f"\nwindow {window[0]:.3g}-{window[1]:.3g} Pa: green"
    bar.set_label(label, fontsize=8)
    return fig
