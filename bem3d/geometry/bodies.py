"""Dielectric bodies: closed surfaces filled with one material."""

from dataclasses import dataclass

import numpy as np

from bem3d.geometry.panels import Panels


def complex_permittivity(eps_r, loss_tangent=0.0):
    """eps_r (1 - j tan d): a plain float when lossless, so that lossless models stay real."""
    return complex(eps_r, -eps_r * loss_tangent) if loss_tangent else float(eps_r)


@dataclass(frozen=True)
class DielectricBody:
    """A closed surface (panels with outward normals, metres) filled with relative permittivity
    eps_r and loss tangent loss_tangent."""

    name: str
    eps_r: float
    panels: Panels
    loss_tangent: float = 0.0

    @property
    def permittivity(self):
        """Relative permittivity, complex eps_r (1 - j tan d) when the body is lossy."""
        return complex_permittivity(self.eps_r, self.loss_tangent)

    @property
    def volume(self):
        """Enclosed volume (m^3) by the divergence theorem; positive for outward normals."""
        p = self.panels
        return float(np.sum(p.areas * np.einsum("ij,ij->i", p.centroids, p.normals)) / 3.0)
