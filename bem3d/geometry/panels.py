"""Panels: flat triangles with their derived geometry, the input every operator works on."""

from dataclasses import dataclass, field

import numpy as np

from bem3d.base.errors import MeshError


@dataclass(frozen=True)
class Panels:
    """Flat triangular panels of all conductors, in metres.

    vertices: (n, 3, 3) corner coordinates; owner: (n,) index of the conductor each panel belongs
    to; names: conductor names in matrix order. Centroids, unit normals (right-hand rule on the
    corner order), areas (m^2), radii (largest centroid-to-corner distance, m) and second
    moments (m^2: the panel's covariance about its centroid, the mean of (y - c)(y - c)^T over
    the panel, stored as xx, yy, zz, xy, xz, yz) are derived.
    """

    vertices: np.ndarray
    owner: np.ndarray
    names: tuple
    centroids: np.ndarray = field(init=False, repr=False)
    normals: np.ndarray = field(init=False, repr=False)
    areas: np.ndarray = field(init=False, repr=False)
    radii: np.ndarray = field(init=False, repr=False)
    moments: np.ndarray = field(init=False, repr=False)

    def __post_init__(self):
        repeated = sorted({n for n in self.names if self.names.count(n) > 1})
        if repeated:          # one name for two conductors: --volts and outputs would mix them
            raise MeshError(f"several conductors are named {', '.join(map(repr, repeated))} "
                            "(Gmsh physical groups of the same name?); give each its own name")
        v = np.ascontiguousarray(self.vertices, dtype=np.float64)
        cross = np.cross(v[:, 1] - v[:, 0], v[:, 2] - v[:, 0])
        twice_area = np.linalg.norm(cross, axis=1)
        centroids = v.mean(axis=1)
        radii = np.linalg.norm(v - centroids[:, None, :], axis=2).max(axis=1)
        # the covariance of a uniform triangle is (1/12) sum_i (v_i - c)(v_i - c)^T
        dv = v - centroids[:, None, :]
        cov = np.einsum("nia,nib->nab", dv, dv) / 12.0
        moments = np.ascontiguousarray(cov.reshape(-1, 9)[:, [0, 4, 8, 1, 2, 5]])
        with np.errstate(invalid="ignore", divide="ignore"):
            normals = cross / twice_area[:, None]
        for name, value in [("vertices", v), ("owner", np.ascontiguousarray(self.owner, np.int64)),
                            ("names", tuple(self.names)), ("centroids", centroids),
                            ("normals", np.ascontiguousarray(normals)), ("areas", 0.5 * twice_area),
                            ("radii", radii), ("moments", moments)]:
            object.__setattr__(self, name, value)

    @classmethod
    def from_arrays(cls, points, triangles, owner, names):
        """Panels from shared corner points (m, 3) and corner indices (n, 3)."""
        return cls(np.asarray(points, np.float64)[np.asarray(triangles)], owner, names)

    def __len__(self):
        return len(self.areas)

    @property
    def n_conductors(self):
        return len(self.names)

    def conductor_areas(self):
        """Surface area of each conductor, m^2."""
        return np.bincount(self.owner, weights=self.areas, minlength=self.n_conductors)

    def excitation(self):
        """Right-hand sides (n_panels, n_conductors): panel area where the panel is on conductor j.

        These are the Galerkin projections of a unit potential on conductor j (others at 0 V)."""
        b = np.zeros((len(self), self.n_conductors))
        b[np.arange(len(self)), self.owner] = self.areas
        return b

    def mirrored(self, z0):
        """The mirror images in the plane z = z0 (m), corner order reversed so that each image
        keeps a right-handed normal (the mirror of the panel's normal)."""
        v = self.vertices[:, ::-1].copy()
        v[..., 2] = 2.0 * z0 - v[..., 2]
        return Panels(v, self.owner, self.names)

    def names_reaching(self, z0):
        """Names of the conductors with a corner at or below the plane z = z0 (m)."""
        return [n for k, n in enumerate(self.names)
                if self.vertices[self.owner == k][..., 2].min() <= z0]

    def transformed(self, scale=1.0, rotation=None, shift=(0.0, 0.0, 0.0)):
        """A copy moved rigidly: x -> scale * R x + shift."""
        v = self.vertices * scale
        if rotation is not None:
            v = v @ np.asarray(rotation).T
        return Panels(v + np.asarray(shift), self.owner, self.names)


def edge_lengths(v):
    """(n, 3) lengths (m) of the edges of panels v (n, 3, 3); edge m joins corners m and m+1."""
    return np.linalg.norm(v[:, [1, 2, 0]] - v, axis=2)
