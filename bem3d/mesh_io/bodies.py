"""Dielectric bodies from mesh files."""

import numpy as np

from bem3d.geometry.bodies import DielectricBody
from bem3d.geometry.panels import Panels
from bem3d.mesh_io.read import read_conductors


def read_bodies(dielectrics, units="m"):
    """DielectricBody list (panels in metres) of [(mesh path, relative permittivity, loss
    tangent)], each file one closed body in the length unit `units`."""
    bodies = []
    for path, eps, loss_tangent in dielectrics:
        panels, _ = read_conductors([path], units=units)
        whole = Panels(panels.vertices, np.zeros(len(panels), int), (panels.names[0],))
        bodies.append(DielectricBody(str(path), eps, whole, loss_tangent))
    return bodies
