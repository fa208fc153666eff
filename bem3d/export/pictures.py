"""PNG pictures rendered off-screen with pyvista (no display needed)."""

import numpy as np

from bem3d.base.units import prefix_for


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


def render_slice(surface, plane, axis, values, target, label, unit):
    """A slice normal to `axis` (0, 1, 2) coloured by values in SI `unit`, seen face on, with
    the conductors' outlines; writes target (.png)."""
    shown, unit = _scaled(np.asarray(values), unit)
    plotter = _plotter()
    plane = plane.copy()
    plane.point_data["shown"] = shown
    plotter.add_mesh(plane, scalars="shown", cmap="inferno",
                     scalar_bar_args={"title": f"{label} [{unit}]", "color": "black"})
    outline = surface.extract_feature_edges()
    if outline.n_points:                      # smooth closed bodies have no feature edges
        plotter.add_mesh(outline, color="white", line_width=1)
    plotter.add_text(f"{label} on the slice {'xyz'[axis]} = const", color="black", font_size=12)
    [plotter.view_yz, plotter.view_xz, plotter.view_xy][axis]()
    plotter.screenshot(str(target))
    plotter.close()
