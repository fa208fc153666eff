"""Dielectric bodies: closed surfaces filled with one material."""

from dataclasses import dataclass

import numpy as np

from bem3d.geometry.panels import Panels


@dataclass(frozen=True)
class DielectricBody:
    """A closed surface (panels with outward normals, metres) filled with relative permittivity eps_r."""

    name: str
    eps_r: float
    panels: Panels

    @property
    def volume(self):
        """Enclosed volume (m^3) by the divergence theorem; positive for outward normals."""
        p = self.panels
        return float(np.sum(p.areas * np.einsum("ij,ij->i", p.centroids, p.normals)) / 3.0)
