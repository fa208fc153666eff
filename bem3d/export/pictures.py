"""PNG pictures rendered off-screen (no display needed): the surface charge in 3D with
pyvista, the slices in 2D with matplotlib."""

import numpy as np

from bem3d.base.constants import LENGTH_UNITS
from bem3d.base.units import prefix_for
from bem3d.geometry.plane_cut import footprint, plane_cut

#: |E| is shown from this fraction of its 99.5th percentile up (energy density: its square).
FIELD_DECADES = 1e-3


def _plotter(shape=(1, 1)):
    from vtkmodules.vtkCommonCore import vtkLogger

    vtkLogger.SetStderrVerbosity(vtkLogger.VERBOSITY_ERROR)   # no X-display chatter
    import pyvista as pv

    plotter = pv.Plotter(off_screen=True, shape=shape, window_size=(900 * shape[1], 800))
    plotter.set_background("white")
    return plotter


def _scaled(values, unit):
    scale, prefix = prefix_for(values)
    return values / scale, f"{prefix}{unit}"


def render_surface_charge(surface, sigma, target, title="surface charge density"):
    """Conductors coloured by sigma (C/m^2) with a labelled colour bar, seen from above and
    from below (boards and lids hide each other from one side); writes target (.png)."""
    values, unit = _scaled(np.asarray(sigma), "C/m^2")
    limit = float(np.max(np.abs(values))) or 1.0
    plotter = _plotter((1, 2))
    surface = surface.copy()
    surface.cell_data["shown"] = values
    for column, (side, view) in enumerate([("from above", (1, 1, 1)), ("from below", (1, 1, -1))]):
        plotter.subplot(0, column)
        plotter.add_mesh(surface, scalars="shown", cmap="coolwarm", clim=(-limit, limit),
                         show_edges=False,
                         scalar_bar_args={"title": f"sigma [{unit}]", "color": "black"})
        plotter.add_text(f"{title}, {side}", color="black", font_size=11)
        plotter.view_vector(view)
    plotter.screenshot(str(target))
    plotter.close()


def _clipped_log_norm(values, floor):
    """A logarithmic colour scale from floor to 1 times the 99.5th percentile of values: edges
    and corners make the field singular, so the maximum would push everything else to one end
    of the scale, and three decades below the typical peak the field no longer matters."""
    from matplotlib.colors import LogNorm

    shown = values[np.isfinite(values) & (values > 0)]
    top = float(np.percentile(shown, 99.5)) if shown.size else 1.0
    return LogNorm(vmin=floor * top, vmax=top, clip=True)


def _outlines(ax, panels, axis, value, plane_axes, scale, reach):
    """The conductors' cross-sections on the slice (thick, cyan) and the sheets within reach
    (m) of it (thin, white: pads just under a slice), each conductor named at its top."""
    from matplotlib.collections import LineCollection

    cuts, footprints = plane_cut(panels.vertices, axis, value), footprint(panels.vertices,
                                                                         axis, value, reach)
    for index, name in enumerate(panels.names):
        shown = []
        for (segments, owner), colour, width in ((footprints, "white", 0.8),
                                                 (cuts, "cyan", 1.5)):
            mine = segments[panels.owner[owner] == index][:, :, plane_axes] / scale
            if len(mine):
                ax.add_collection(LineCollection(mine, colors=colour, linewidths=width))
                shown.append(mine.reshape(-1, 2))
        if shown:
            points = np.concatenate(shown)
            ax.annotate(name, points[np.argmax(points[:, 1])], xytext=(0, 4),
                        textcoords="offset points", ha="center", va="bottom", fontsize=8,
                        bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": "none",
                              "alpha": 0.8})


def render_slice_picture(panels, axis, value, grid, arrays, target, unit):
    """One slice normal to `axis` (0, 1, 2) at `value` (m): |E| on a clipped log scale with
    equipotentials and field lines, and the energy density 1/2 eps|E|^2 beside it, the
    conductors' cross-sections outlined and named; axes in the model's length unit. panels and
    grid in metres, arrays in the grid's point order (SI); writes target (.png)."""
    from matplotlib import colormaps
    from matplotlib.figure import Figure  # heavy: loaded only to draw
    from matplotlib.ticker import MaxNLocator

    scale = LENGTH_UNITS[unit]
    a, b = [i for i in range(3) if i != axis]
    u = (grid.origin[a] + grid.spacing[a] * np.arange(grid.shape[a])) / scale
    w = (grid.origin[b] + grid.spacing[b] * np.arange(grid.shape[b])) / scale

    def plane(values):                       # grid order: the first in-plane axis fastest
        return np.asarray(values).reshape(len(w), len(u))

    inside = plane(arrays["inside_conductor"]).astype(bool)
    field = np.ma.masked_where(inside, plane(arrays["E_magnitude"]) * scale)
    energy = np.ma.masked_where(inside, plane(arrays["energy_density"]))
    phi = plane(arrays["phi"])
    e_u, e_w = plane(arrays["E"][:, a]), plane(arrays["E"][:, b])

    reach = float(max(grid.spacing[a], grid.spacing[b]))    # one grid step: what the slice sees
    fig = Figure(figsize=(13, 5.6))
    axes = fig.subplots(1, 2)
    extent = (u[0], u[-1], w[0], w[-1])
    panels_shown = [(field, FIELD_DECADES, "inferno", f"|E| [V/{unit}]"),
                    (energy, FIELD_DECADES ** 2, "viridis", "energy density ½ε|E|² [J/m³]")]
    for ax, (values, floor, cmap, label) in zip(axes, panels_shown):
        # grey: inside a closed conductor
        image = ax.imshow(values, origin="lower", extent=extent, aspect="equal",
                          cmap=colormaps[cmap].with_extremes(bad="lightgrey"),
                          norm=_clipped_log_norm(values.compressed(), floor),
                          interpolation="bilinear")
        fig.colorbar(image, ax=ax, shrink=0.85, label=label)
        _outlines(ax, panels, axis, value, [a, b], scale, reach)
        ax.set_xlabel(f"{'xyz'[a]} [{unit}]")
        ax.set_ylabel(f"{'xyz'[b]} [{unit}]")
        ax.set_xlim(u[0], u[-1])
        ax.set_ylim(w[0], w[-1])
    title = "|E| (clipped log scale), field lines"
    if np.ptp(phi) > 0:
        levels = MaxNLocator(10).tick_values(phi.min(), phi.max())
        axes[0].contour(u, w, phi, levels=levels, colors="white", linewidths=0.7, alpha=0.9)
        title += f", equipotentials every {levels[1] - levels[0]:.3g} V"
    if np.any(np.hypot(e_u, e_w) > 0):
        axes[0].streamplot(u, w, e_u, e_w, color="grey", linewidth=0.4, density=0.9,
                           arrowsize=0.6)
    axes[0].set_title(title, fontsize=10)
    axes[1].set_title("energy density (clipped log scale)", fontsize=10)
    fig.suptitle(f"slice {'xyz'[axis]} = {value / scale:.6g} {unit}")
    fig.text(0.5, 0.01, f"cyan: conductors cut by the slice; white: conductor surfaces within "
             f"{reach / scale:.3g} {unit} of it; grey areas: inside a closed conductor",
             ha="center", fontsize=8)
    fig.tight_layout(rect=(0, 0.03, 1, 1))
    fig.savefig(target, dpi=110, format="png")
