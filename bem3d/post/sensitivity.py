"""Sensitivities of the Maxwell matrix to rigid translations of each conductor, from the solved
charge densities per volt alone (no further solve).

The force on conductor k at fixed potentials V is F_k = +dW/dx_k with W = 1/2 V^T C V (energy
at fixed potentials), and it is the charge of k in the field of every other source: the other
conductors' charge and, with a grounded plane, the images of all charge, k's own included (a
charge exerts no net force on itself). Both are quadratic forms in V; equating them gives, per
pair of excitations i, j,

    dC_ij/dx_k = integral over S_k of (sigma_i E_ext,j + sigma_j E_ext,i) . x dA,

with E_ext,j the field of excitation j without k's own charge. This is the Maxwell stress
sigma^2/(2 eps) n on a closed conductor less its self-force, and it holds as it stands for open
sheets (no face densities needed) and for closed bodies with edges, where the field of the
others is smooth while the stress is not. On panels it is the exact derivative of the
discretised C (the Galerkin matrix's rows between k and the rest, differentiated), so it
converges as C does. Floating and reference conductors change nothing in the form: the reduced
charge densities (with the induced charge of floating conductors) are used. Dielectric bodies
add interface terms not included here."""

import math

import numpy as np

from bem3d.base.constants import EPS0
from bem3d.geometry.panels import Panels
from bem3d.solve.dielectric import normal_field_product

#: The field of every panel on every panel, along three axes, in dense rows: above this many
#: panel pairs (some 40 s on two cores) the sensitivities are left out with a warning rather
#: than a silent long wait.
MAX_PAIRS = 3e7


def sensitivity_problem(solved, panels):
    """Why the sensitivities cannot be given for this result (one line), or None."""
    if solved.sources is not None and solved.sources.bodies:
        return ("sensitivities of the capacitance matrix are not given with dielectric bodies "
                "yet (their interface terms are not implemented)")
    if len(panels) ** 2 > MAX_PAIRS:
        return (f"sensitivities of the capacitance matrix are not given above "
                f"{math.isqrt(int(MAX_PAIRS)):,} panels ({len(panels):,} here): they need the "
                "field of every panel on every panel")
    return None


def external_field(solved, panels, k):
    """(3, m, n): the field (V/m) per volt on each conductor along x, y, z averaged over each
    panel of conductor k, without k's own charge (its images kept)."""
    eps = EPS0 * solved.solver.get("relative_permittivity", 1.0)
    ground_z = solved.solver.get("ground_plane_z_m")
    on = panels.owner == k
    own = Panels(panels.vertices[on], panels.owner[on], panels.names)
    fields = []
    for direction in np.eye(3):
        # eps E.d = (1/4 pi) sum_l <d . g_l> sigma_l, whatever the uniform medium
        every = normal_field_product(own, panels, ground_z, solved.sigma, direction=direction)
        itself = normal_field_product(own, own, None, solved.sigma[on], direction=direction)
        fields.append((every - itself) / (4 * math.pi * eps))
    return np.stack(fields)


def maxwell_sensitivity(solved, panels):
    """{conductor name: (3, n, n) array}: dC/dx, dC/dy, dC/dz (F/m) of the Maxwell matrix
    `solved.maxwell` (n terminals) when that conductor alone translates rigidly; every
    conductor of `panels` (metres) has one, floating and reference conductors included.
    Callers check sensitivity_problem first."""
    out = {}
    for k, name in enumerate(panels.names):
        on = panels.owner == k
        half = np.einsum("p,pi,apj->aij", panels.areas[on], solved.sigma[on],
                         external_field(solved, panels, k))
        out[name] = half + half.transpose(0, 2, 1)
    return out
