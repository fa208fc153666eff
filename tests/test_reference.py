"""A conductor taken as the ground node (--reference): the others' matrices relative to it.

Checks: the matrices against nodal analysis of the two-terminal network (the mutual
capacitances, each conductor's capacitance to infinity) with the reference node and infinity
tied to ground, built here with numpy from the full Maxwell matrix (Kirchhoff's current law,
as in any circuit text); a sphere inside a concentric grounded shell, C = 4 pi eps0 a b/(b - a)
(the spherical capacitor, Jackson 1999, Classical Electrodynamics, 3rd ed., section 1.12), with
an outer sphere that the shell screens from it; and the command line's files and refusals.
"""

import json

import meshio
import numpy as np
import pytest
import reference_values as ref
from conftest import make_panels
from conftest import run_cli as run

from bem3d.base.errors import ModelError
from bem3d.geometry import shapes
from bem3d.post.sweep.cache import with_potentials
from bem3d.solve.conductors import solve_panels


def nodal_matrix(full, reference):
    """The nodal capacitance matrix of the conductors other than `reference` from the circuit
    of two-terminal capacitors of the full Maxwell matrix: c_ij = -C_ij between conductors,
    c_i,inf = sum_j C_ij to infinity; the reference and infinity are one grounded node."""
    n = len(full)
    to_infinity = full.sum(axis=1)
    others = [i for i in range(n) if i != reference]
    y = np.zeros((len(others), len(others)))
    for a, i in enumerate(others):
        y[a, a] = to_infinity[i] + sum(-full[i, j] for j in range(n) if j != i)
        for b, j in enumerate(others):
            if j != i:
                y[a, b] = full[i, j]            # -c_ij
    return y


def three_conductors(m=4):
    return make_panels(("a", shapes.octahedral_sphere(0.5, m)),
                       ("pour", shapes.box(3.0, 3.0, 0.2, m, center=(0.6, 0.0, -1.0))),
                       ("b", shapes.octahedral_sphere(0.4, m, center=(1.5, 0.3, 0.1))))


def test_reference_matches_nodal_analysis_of_the_full_network():
    panels = three_conductors()
    full = solve_panels(panels, volts={"a": 1.0, "b": -2.0})
    grounded = solve_panels(panels, volts={"a": 1.0, "b": -2.0}, reference="pour")
    assert grounded.names == ("a", "b") and grounded.reference == "pour"
    expected = nodal_matrix(full.maxwell, 1)
    np.testing.assert_allclose(grounded.maxwell, expected, rtol=1e-12, atol=0)
    # the diagonal of the mutual matrix: capacitance to the pour plus to infinity
    c = full.maxwell
    for a, i in enumerate((0, 2)):
        assert grounded.mutual[a, a] == pytest.approx(-c[i, 1] + c[i].sum(), rel=1e-12)
    assert grounded.energy == pytest.approx(0.5 * np.array([1, 0, -2]) @ c @ [1, 0, -2],
                                            rel=1e-12)
    # the field is that of the full solve at the same potentials (pour at 0 V)
    np.testing.assert_allclose(grounded.panel_sigma(), full.panel_sigma(), rtol=0,
                               atol=1e-12 * np.abs(full.panel_sigma()).max())
    # the sweep applies the reference to a cached full matrix: the same result, no solve
    cached = with_potentials(solve_panels(panels), {"a": 1.0, "b": -2.0}, (), "pour")
    np.testing.assert_allclose(cached.maxwell, grounded.maxwell, rtol=1e-12)


def test_reference_with_a_floating_conductor_and_a_ground_plane():
    panels = three_conductors()
    full = solve_panels(panels, ground_z=-1.5)
    grounded = solve_panels(panels, ground_z=-1.5, floating=["b"], reference="pour")
    # b floats (Schur complement), then the pour and the plane are the ground node
    c = full.maxwell
    t, f = [0], [2]
    schur = c[np.ix_(t, t)] - c[np.ix_(t, f)] @ np.linalg.solve(c[np.ix_(f, f)], c[np.ix_(f, t)])
    np.testing.assert_allclose(grounded.maxwell, schur, rtol=1e-10)
    assert grounded.names == ("a",)


def test_sphere_in_a_reference_shell_is_the_spherical_capacitor():
    a, b = 1.0, 2.0

    def run_mesh(m):
        panels = make_panels(("ball", shapes.octahedral_sphere(a, m)),
                             ("shell", shapes.octahedral_sphere(b, m)),
                             ("outside", shapes.octahedral_sphere(0.5, m, center=(3.5, 0, 0))))
        return solve_panels(panels, reference="shell").maxwell

    coarse, fine = run_mesh(4), run_mesh(8)
    expected = ref.sphere_in_shell(a, b)[0, 0]
    assert ref.richardson(coarse[0, 0], fine[0, 0]) == pytest.approx(expected, rel=2e-3)
    # the closed shell screens the ball from the outer sphere (exactly zero in the limit)
    assert abs(fine[0, 1]) < 1e-4 * fine[0, 0]


@pytest.mark.parametrize("options, words", [
    ({"reference": "nothing"}, "no conductor named nothing"),
    ({"reference": "a", "volts": {"a": 1.0}}, "is the reference conductor"),
    ({"reference": "a", "floating": ["a"]}, "is floating"),
])
def test_bad_reference_is_refused_before_the_solve(options, words):
    panels = make_panels(("a", shapes.octahedral_sphere(0.5, 2)),
                         ("b", shapes.octahedral_sphere(0.5, 2, center=(2.0, 0, 0))))
    with pytest.raises(ModelError, match=words):
        solve_panels(panels, **options)


def test_a_lone_reference_is_refused():
    panels = make_panels(("a", shapes.octahedral_sphere(0.5, 2)))
    with pytest.raises(ModelError, match="only terminal"):
        solve_panels(panels, reference="a")


def _mesh(path, shape):
    meshio.write(path, meshio.Mesh(shape[0], [("triangle", shape[1])]))
    return path


def test_cli_reference_writes_its_files_and_refuses_bad_names(tmp_path, capsys):
    files = [_mesh(tmp_path / "drive.stl", shapes.octahedral_sphere(0.5, 3)),
             _mesh(tmp_path / "pour.stl", shapes.box(3.0, 3.0, 0.2, 3, center=(0, 0, -1.0)))]
    model = tmp_path / "model.toml"
    model.write_text('meshes = ["drive.stl", "pour.stl"]\nreference = "pour"\n'
                     '[volts]\ndrive = 1.0\n[output]\nfolder = "out"\n')
    code, stdout, _ = run(["extract", model], capsys)
    assert code == 0 and "to reference pour" in stdout
    record = json.loads((tmp_path / "out" / "result.json").read_text())
    assert record["reference"] == "pour" and record["conductors"] == ["drive"]
    spice = (tmp_path / "out" / "bem3d_capacitance.cir").read_text()
    assert '* REF is the conductor "pour"' in spice
    assert ".SUBCKT bem3d_capacitance drive REF" in spice
    c_ref = float(spice.split("C_1_REF drive REF ")[1].split()[0])
    assert c_ref == pytest.approx(record["mutual_capacitance_F"][0][0], rel=1e-6)

    code, _, err = run(["extract", *files, "--reference", "gnd", "--out", tmp_path / "x"],
                       capsys)
    assert code == 2 and "no conductor named gnd" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "x" / "result.json").exists()
    model.write_text('meshes = ["drive.stl"]\nreference = 3\n')
    code, _, err = run(["extract", model], capsys)
    assert code == 2 and "'reference' must be a conductor name" in err
