"""Boxes of evaluation points."""

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Grid:
    """A box of points: origin (3,) m, spacing (3,) m, shape (nx, ny, nz); x varies fastest."""

    origin: np.ndarray
    spacing: np.ndarray
    shape: tuple

    @classmethod
    def around(cls, lo, hi, margin=0.5, points=(41, 41, 41)):
        """Box around [lo, hi] widened by margin * size on every side."""
        lo, hi = np.asarray(lo, float), np.asarray(hi, float)
        pad = margin * (hi - lo).max()
        return cls.box(lo - pad, hi + pad, points)

    @classmethod
    def box(cls, lo, hi, points):
        lo, hi = np.asarray(lo, float), np.asarray(hi, float)
        shape = tuple(int(p) for p in points)
        spacing = np.where(np.array(shape) > 1, (hi - lo) / np.maximum(np.array(shape) - 1, 1), 1.0)
        return cls(lo, spacing, shape)

    def axes(self):
        return [self.origin[a] + self.spacing[a] * np.arange(self.shape[a]) for a in range(3)]

    def points(self):
        x, y, z = np.meshgrid(*self.axes(), indexing="ij")
        return np.column_stack([x.ravel(order="F"), y.ravel(order="F"), z.ravel(order="F")])

    def trapezoid_weights(self):
        """Volume weights (m^3) of the trapezoid rule at each point, in points() order."""
        w = []
        for a in range(3):
            wa = np.full(self.shape[a], self.spacing[a])
            if self.shape[a] > 1:
                wa[[0, -1]] *= 0.5
            w.append(wa)
        return np.einsum("i,j,k->ijk", *w).ravel(order="F")

    def boundary(self):
        """Points on the box faces (q, 3), their outward normals (q, 3) and area weights (q,),
        by the trapezoid rule on each face (edges and corners shared between faces)."""
        ax = self.axes()
        pts, nrm, wts = [], [], []
        for a in range(3):
            b, c = [i for i in range(3) if i != a]
            wb = np.full(self.shape[b], self.spacing[b])
            wc = np.full(self.shape[c], self.spacing[c])
            wb[[0, -1]] *= 0.5
            wc[[0, -1]] *= 0.5
            gb, gc = np.meshgrid(ax[b], ax[c], indexing="ij")
            for side, value in ((-1.0, ax[a][0]), (1.0, ax[a][-1])):
                p = np.empty((gb.size, 3))
                p[:, a], p[:, b], p[:, c] = value, gb.ravel(), gc.ravel()
                n = np.zeros((gb.size, 3))
                n[:, a] = side
                pts.append(p)
                nrm.append(n)
                wts.append(np.outer(wb, wc).ravel())
        return np.concatenate(pts), np.concatenate(nrm), np.concatenate(wts)
