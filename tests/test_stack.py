"""Metal on laminate: zero-thickness conductors whose two faces see different media, bodies
lying on the grounded plane, bodies stacked on each other.

References:
* spherical capacitor filled with a dielectric, from Gauss's law with D = eps E between the
  spheres (any electrostatics text, e.g. Jackson, Classical Electrodynamics, 3rd ed. 1999,
  sec. 4.4): C = 4 pi eps0 eps_r a b / (b - a) between spheres of radii a < b;
* a closed conductor screens its inside (Jackson 1999, sec. 1.12): the capacitance of a closed
  sheet sphere of radius a to infinity is 4 pi eps0 a whatever fills it;
* the method of images (Jackson 1999, sec. 2.1): a grounded plane equals, above it, the mirror
  images of every charge, free or bound, with the opposite sign;
* microstrip: Hammerstad & Jensen 1980, "Accurate models for microstrip computer-aided
  design", IEEE MTT-S Int. Microwave Symp. Digest, pp. 407-409 (the quasi-static effective
  permittivity and characteristic impedance of a strip of width w on a substrate of height h).
"""

import math

import numpy as np
import pytest
import reference_values as ref

from bem3d.base.errors import MeshError, ModelError
from bem3d.geometry import shapes
from bem3d.geometry.bodies import DielectricBody
from bem3d.geometry.panels import Panels
from bem3d.solve.conductors import solve_panels
from bem3d.solve.dielectric import solve_with_dielectrics

EPS0 = ref.EPS0


def sphere(radius, m, name="s", inward=False, centre=(0.0, 0.0, 0.0)):
    p, t = shapes.octahedral_sphere(radius, m, center=centre)
    t = t[:, ::-1] if inward else t
    return Panels.from_arrays(p, t, np.zeros(len(t), int), (name,))


def joined(*parts):
    """One Panels of several single-conductor Panels, conductor k = part k."""
    return Panels(np.concatenate([p.vertices for p in parts]),
                  np.concatenate([np.full(len(p), k) for k, p in enumerate(parts)]),
                  tuple(p.names[0] for p in parts))


def shell_body(a, b, m, eps_r):
    """A dielectric shell a < r < b: the outer sphere outward, the inner one inward."""
    outer, inner = sphere(b, m), sphere(a, m, inward=True)
    return DielectricBody("shell", eps_r, Panels(np.concatenate([outer.vertices, inner.vertices]),
                                                 np.zeros(len(outer) + len(inner), int),
                                                 ("shell",)))


@pytest.mark.parametrize("eps_r", [1.0, 4.0])
def test_filled_spherical_capacitor_with_sheet_electrodes(eps_r):
    # two closed sheet spheres a = 1, b = 2 with a dielectric shell exactly between them (its
    # faces meshed as the electrodes): the inner pair has C = 4 pi eps0 eps_r a b / (b - a);
    # the outer sphere also sees infinity, C_22 = that + 4 pi eps0 b (Gauss's law)
    a, b, m = 1.0, 2.0, 12
    conductors = joined(sphere(a, m, "inner"), sphere(b, m, "outer"))
    c = solve_with_dielectrics(conductors, [shell_body(a, b, m, eps_r)]).maxwell
    pair = 4 * math.pi * EPS0 * eps_r * a * b / (b - a)
    exact = np.array([[pair, -pair], [-pair, pair + 4 * math.pi * EPS0 * b]])
    # 1152 panels per sphere: the flat-panel error of the bare spheres is about 0.5 %
    np.testing.assert_allclose(c, exact, rtol=1e-2)
    np.testing.assert_allclose(c, c.T, rtol=1e-12)


@pytest.mark.parametrize("eps_r", [2.0, 10.0])
def test_a_closed_sheet_screens_the_ball_it_encloses(eps_r):
    # Jackson 1999, sec. 1.12: C = 4 pi eps0 a whatever fills the closed conductor
    shell = sphere(1.0, 10, "can")
    ball = DielectricBody("ball", eps_r, sphere(0.6, 8, "ball"))
    c = solve_with_dielectrics(shell, [ball]).maxwell[0, 0]
    assert c == pytest.approx(4 * math.pi * EPS0 * 1.0, rel=1.5e-2)
    filled = DielectricBody("filling", eps_r, sphere(1.0, 10, "filling"))
    c_filled = solve_with_dielectrics(shell, [filled]).maxwell[0, 0]
    assert c_filled == pytest.approx(c, rel=1e-9)


def exact_mirror(panels, z0):
    """The mirror image in z = z0, corners 1 and 2 swapped so that the graded test rule (a
    Duffy map from corner 0) maps onto the exact mirrors of the original's points."""
    v = panels.vertices[:, [0, 2, 1]].copy()
    v[..., 2] = 2.0 * z0 - v[..., 2]
    return Panels(v, panels.owner, panels.names)


def box_panels(lx, ly, lz, m, centre, name):
    p, t = shapes.box(lx, ly, lz, m, grading=0.5, center=centre)
    return Panels.from_arrays(p, t, np.zeros(len(t), int), (name,))


def test_substrate_standing_on_the_plane_equals_the_mirrored_model():
    # method of images (Jackson 1999, sec. 2.1): a board standing on the grounded plane z = 0
    # with a pad above it, at +1 V, holds the charge of the same pad and board next to their
    # mirror copies (the board doubled, the pad at -1 V) with no plane. The two boards share
    # their face on z = 0, meshed identically, so that face carries no charge: exactly what
    # the plane's images do with it.
    board = DielectricBody("board", 4.4, box_panels(2.0, 2.0, 0.5, 6, (0, 0, 0.25), "board"))
    pad = box_panels(0.6, 0.6, 0.1, 4, (0.2, 0.0, 0.7), "pad")
    over_plane = solve_with_dielectrics(pad, [board], ground_z=0.0)
    low_pad = exact_mirror(pad, 0.0)
    pair = Panels(np.concatenate([pad.vertices, low_pad.vertices]),
                  np.repeat([0, 1], len(pad)), ("up", "down"))
    low_board = DielectricBody("low board", 4.4, exact_mirror(board.panels, 0.0))
    free = solve_with_dielectrics(pair, [board, low_board])
    q_up = float(pad.areas @ (free.sigma[:len(pad), 0] - free.sigma[:len(pad), 1]))
    assert over_plane.maxwell[0, 0] == pytest.approx(q_up, rel=1e-9)
    # and the board raises the pad's capacitance to ground (a dielectric only adds
    # capacitance: Thomson's theorem, from memory)
    bare = solve_panels(pad, ground_z=0.0).maxwell[0, 0]
    assert over_plane.maxwell[0, 0] > 1.2 * bare


def test_a_body_reaching_below_the_plane_is_refused():
    board = DielectricBody("board", 4.4, box_panels(2.0, 2.0, 0.5, 4, (0, 0, 0.2), "board"))
    pad = box_panels(0.6, 0.6, 0.1, 4, (0.0, 0.0, 0.7), "pad")
    with pytest.raises(ModelError, match="board cross or lie below the plane"):
        solve_with_dielectrics(pad, [board], ground_z=0.0)


def test_stacked_bodies_must_share_faces_meshed_alike():
    # a cover standing on a board: the board's top face and the cover's bottom face overlap;
    # meshed alike they are one interface, meshed differently the model is refused
    board = DielectricBody("board", 4.4, box_panels(2.0, 2.0, 0.5, 4, (0, 0, 0.25), "board"))
    alike = DielectricBody("cover", 3.0, box_panels(2.0, 2.0, 0.5, 4, (0, 0, 0.75), "cover"))
    unlike = DielectricBody("cover", 3.0, box_panels(2.0, 2.0, 0.5, 5, (0, 0, 0.75), "cover"))
    pad = box_panels(0.6, 0.6, 0.1, 4, (0.2, 0.0, 1.3), "pad")
    assert solve_with_dielectrics(pad, [board, alike], ground_z=0.0).maxwell[0, 0] > 0
    with pytest.raises(MeshError, match="meshed alike near"):
        solve_with_dielectrics(pad, [board, unlike], ground_z=0.0)


def hammerstad_jensen_capacitance(w, h, eps_r):
    """Quasi-static capacitance per unit length (F/m) of a zero-thickness microstrip of width w
    on a substrate of height h over ground: C = eps_eff / (c Z01), with Z01 the impedance of
    the strip in air and eps_eff the effective permittivity (Hammerstad & Jensen 1980, the
    formulas as published there; written here from memory)."""
    u = w / h
    eta0 = 376.730313412                                # free-space impedance, ohm (CODATA)
    f = 6.0 + (2 * math.pi - 6.0) * math.exp(-(30.666 / u) ** 0.7528)
    z01 = eta0 / (2 * math.pi) * math.log(f / u + math.sqrt(1.0 + (2.0 / u) ** 2))
    a = (1.0 + math.log((u**4 + (u / 52.0) ** 2) / (u**4 + 0.432)) / 49.0
         + math.log(1.0 + (u / 18.1) ** 3) / 18.7)
    b = 0.564 * ((eps_r - 0.9) / (eps_r + 3.0)) ** 0.053
    eps_eff = (eps_r + 1) / 2 + (eps_r - 1) / 2 * (1.0 + 10.0 / u) ** (-a * b)
    return eps_eff / (299792458.0 * z01)


def graded_nodes(*stops, per_unit=4):
    """Increasing nodes through the given stops, each interval divided into cells that shrink
    towards both of its ends (where strip and board edges concentrate the charge)."""
    nodes = [stops[0]]
    for lo, hi in zip(stops[:-1], stops[1:]):
        n = max(2, int(round(per_unit * (hi - lo))))
        nodes.extend(lo + (hi - lo) * shapes.graded_spacing(n, 0.5)[1:])
    return np.array(nodes)


def microstrip(length, w=2.0, h=1.0, eps_r=4.4, margin=5.0):
    """A sheet strip (width w, length) on a board of height h standing on the grounded plane
    z = 0, the board's top face meshed through the strip's edges: (strip, board)."""
    half = w / 2 + margin
    xs = graded_nodes(-half, -w / 2, w / 2, half, per_unit=3)
    ys = graded_nodes(-length / 2 - margin, -length / 2, length / 2, length / 2 + margin,
                      per_unit=2)
    p, t = shapes.lattice_box(xs, ys, [0.0, h / 2, h])
    board = Panels.from_arrays(p, t, np.zeros(len(t), int), ("board",))
    c = board.centroids
    on_strip = ((np.abs(c[:, 2] - h) < 1e-12) & (np.abs(c[:, 0]) < w / 2)
                & (np.abs(c[:, 1]) < length / 2))
    strip = Panels(board.vertices[on_strip], np.zeros(int(on_strip.sum()), int), ("strip",))
    return strip, DielectricBody("board", eps_r, board)


def test_microstrip_per_unit_length_against_hammerstad_jensen():
    # two strip lengths, the difference of their capacitances to ground over the difference
    # of lengths: the ends cancel, leaving the per-unit-length value of the infinite line
    c = []
    for length in (6.0, 10.0):
        strip, board = microstrip(length)
        c.append(solve_with_dielectrics(strip, [board], ground_z=0.0).maxwell[0, 0])
    per_length = (c[1] - c[0]) / 4.0
    assert per_length == pytest.approx(hammerstad_jensen_capacitance(2.0, 1.0, 4.4), rel=0.03)


# Lossy media: complex permittivity eps0 eps_r (1 - j tan d) in the static equations (the
# quasi-static phasor form of Gauss's law, e.g. Ramo, Whinnery & Van Duzer, Fields and Waves in
# Communication Electronics, 3rd ed. 1994, sec. 13.3); C* = C - j G / omega.

def coated_sphere_closed_form(a, b, eps):
    # Gauss's law through the coating a < r < b (eps) and the vacuum outside (Jackson 1999,
    # sec. 4.4): 1/C = (1/(4 pi eps0)) ((1/a - 1/b)/eps + 1/b)
    return 4 * math.pi * EPS0 / ((1 / a - 1 / b) / eps + 1 / b)


@pytest.mark.parametrize("backend", ["dense", "compressed"])
def test_lossy_coated_sphere_against_the_complex_closed_form(backend):
    a, b, m, eps_r, tan_d, f = 1.0, 1.5, 10, 4.0, 0.05, 1e6
    coating = shell_body(a, b, m, eps_r)
    coating = DielectricBody("coating", eps_r, coating.panels, loss_tangent=tan_d)
    result = solve_panels(sphere(a, m, "ball"), dielectrics=[coating], frequency=f,
                          backend=backend)
    exact = coated_sphere_closed_form(a, b, eps_r * (1 - 1j * tan_d))
    assert result.maxwell[0, 0] == pytest.approx(exact.real, rel=1e-2)
    omega = 2 * math.pi * f
    assert result.conductance[0, 0] == pytest.approx(-omega * exact.imag, rel=2e-2)
    assert result.frequency_Hz == f


def test_one_loss_tangent_everywhere_gives_g_equal_omega_tan_d_c():
    # every medium eps_r (1 - j tan d) with the same tan d: the complex factor is common to all
    # of them, so C* = (1 - j tan d) C exactly and G = omega tan d C (any layering)
    tan_d, f = 0.02, 2.5e5
    conductors = joined(sphere(0.5, 6, "a", centre=(-1.0, 0, 0)),
                        sphere(0.5, 6, "b", centre=(1.0, 0, 0)))
    slab = DielectricBody("slab", 4.4, box_panels(1.0, 2.0, 2.0, 4, (0, 0, 0), "slab"),
                          loss_tangent=tan_d)
    result = solve_panels(conductors, eps_r=2.0, loss_tangent=tan_d, frequency=f,
                          dielectrics=[slab], backend="dense")
    lossless = solve_panels(conductors, eps_r=2.0, backend="dense",
                            dielectrics=[DielectricBody("slab", 4.4, slab.panels)])
    np.testing.assert_allclose(result.maxwell, lossless.maxwell, rtol=1e-9)
    np.testing.assert_allclose(result.conductance, 2 * math.pi * f * tan_d * lossless.maxwell,
                               rtol=1e-9)
    alone = solve_panels(conductors, eps_r=2.0, loss_tangent=tan_d, frequency=f)
    np.testing.assert_allclose(alone.conductance, 2 * math.pi * f * tan_d * alone.maxwell,
                               rtol=1e-12)


def test_conductance_matrix_is_symmetric_positive_semidefinite():
    # a passive lossy medium dissipates power 1/2 V^T G V >= 0 for every V (Poynting's theorem,
    # Ramo, Whinnery & Van Duzer 1994, sec. 3.13)
    conductors = joined(sphere(0.5, 6, "a", centre=(-1.0, 0, 0)),
                        sphere(0.5, 6, "b", centre=(1.0, 0, 0)),
                        sphere(0.3, 4, "c", centre=(0, 1.2, 0)))
    slab = DielectricBody("slab", 4.4, box_panels(1.0, 2.0, 2.0, 4, (0, 0, 0), "slab"),
                          loss_tangent=0.03)
    g = solve_panels(conductors, dielectrics=[slab], frequency=1e6, backend="dense").conductance
    np.testing.assert_allclose(g, g.T, rtol=1e-12)
    assert np.linalg.eigvalsh(g).min() >= -1e-9 * np.abs(g).max()
    assert np.abs(g).max() > 0


@pytest.mark.parametrize("tan_d, frequency", [(-0.01, 1e6), (1.0, 1e6), (0.02, 0.0),
                                              (0.02, -5.0), (0.02, float("nan")), (0.02, None)])
def test_bad_loss_tangent_or_frequency_is_refused(tan_d, frequency):
    slab = DielectricBody("slab", 4.4, box_panels(1.0, 1.0, 1.0, 3, (0, 0, 0), "slab"),
                          loss_tangent=tan_d)
    with pytest.raises(ModelError):
        solve_panels(sphere(0.3, 3, "s", centre=(0, 0, 2.0)), dielectrics=[slab],
                     frequency=frequency)


def test_lossy_filled_spherical_capacitor_with_sheet_electrodes():
    # the filled spherical capacitor (Jackson 1999, sec. 4.4) with a lossy filling:
    # C* = 4 pi eps0 eps_r (1 - j tan d) a b / (b - a) for the inner pair, G = omega tan d C
    a, b, m, eps_r, tan_d, f = 1.0, 2.0, 10, 4.0, 0.02, 1e5
    conductors = joined(sphere(a, m, "inner"), sphere(b, m, "outer"))
    shell = shell_body(a, b, m, eps_r)
    shell = DielectricBody("shell", eps_r, shell.panels, loss_tangent=tan_d)
    result = solve_panels(conductors, dielectrics=[shell], frequency=f, backend="dense")
    pair = 4 * math.pi * EPS0 * eps_r * a * b / (b - a)
    assert result.maxwell[0, 0] == pytest.approx(pair, rel=1e-2)
    assert result.conductance[0, 0] == pytest.approx(2 * math.pi * f * tan_d * pair, rel=1e-2)
    # the outer sphere's charge to infinity sits on its vacuum face: no loss there
    assert result.conductance.sum() == pytest.approx(0.0, abs=1e-3 * result.conductance[0, 0])
