"""The public Python API: bem3d.read / extract / field, the Result object, one length unit.

References: the capacitance matrix of two spheres by Smythe's bispherical series
(W. R. Smythe, Static and Dynamic Electricity, 3rd ed. 1968, sec. 5.08; computed in
tests/reference_values.py); the exact scaling C(sL) = s C(L) of the electrostatic problem
(the Laplace equation has no length scale), and the identity of the API with the command line.
"""

import json
from html.parser import HTMLParser

import meshio
import numpy as np
import pytest
import reference_values as ref
from conftest import run_cli

import bem3d
from bem3d.geometry import shapes

RADIUS_MM = 1.0
CENTRES_MM = 3.0          # centre distance, in radii


def write_sphere(path, centre, m=8, scale=1.0):
    points, tris = shapes.octahedral_sphere(RADIUS_MM * scale, m,
                                            np.asarray(centre, float) * scale)
    meshio.write(path, meshio.Mesh(points, [("triangle", tris)]))
    return path


@pytest.fixture
def spheres(tmp_path):
    """Two unit spheres (mm) 3 radii apart, one file each: conductors 'left' and 'right'."""
    return [write_sphere(tmp_path / "left.stl", (0.0, 0.0, 0.0)),
            write_sphere(tmp_path / "right.stl", (CENTRES_MM, 0.0, 0.0))]


def test_extract_matches_the_command_line_and_prints_nothing(spheres, tmp_path, capsys):
    result = bem3d.extract(spheres, units="mm", volts={"left": 2.0})
    out, _ = capsys.readouterr()
    assert out == ""
    assert not list(tmp_path.glob("*_result"))          # no files unless asked
    code, _, _ = run_cli(["extract", *spheres, "--units", "mm", "--volts", "left=2",
                          "--out", tmp_path / "cli", "--quiet"], capsys)
    record = json.loads((tmp_path / "cli" / "result.json").read_text())
    assert code == 0 and list(result.names) == record["conductors"] == ["left", "right"]
    np.testing.assert_allclose(result.maxwell, record["maxwell_capacitance_F"], rtol=1e-12)
    assert result.energy == pytest.approx(record["energy_J"], rel=1e-12)
    np.testing.assert_allclose(result.charges, record["charges_C"], rtol=1e-12)


def test_extract_two_spheres_against_the_bispherical_series(spheres):
    result = bem3d.extract(spheres, units="mm")
    # Smythe's series for radius a, centre distance c (SI); 512 panels per sphere leave the
    # flat-panel discretisation error of about 1% (a lower bound: Galerkin is variational)
    exact = ref.two_spheres(RADIUS_MM * 1e-3, CENTRES_MM * 1e-3)
    np.testing.assert_allclose(result.maxwell, exact, rtol=0.02)
    assert np.all(np.diag(result.maxwell) < np.diag(exact))
    np.testing.assert_allclose(result.mutual[0, 1], -result.maxwell[0, 1])


class _Tables(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.text = [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)

    def handle_data(self, data):
        self.text.append(data)


def test_result_shows_tables_never_arrays(spheres):
    result = bem3d.extract(spheres, units="mm")
    text = repr(result)
    assert "left" in text and "right" in text and "Maxwell" in text
    assert "array(" not in text and "[[" not in text
    parsed = _Tables()
    parsed.feed(result._repr_html_())
    assert "table" in parsed.tags and {"left", "right"} <= set(parsed.text)
    frame = result.to_dataframe()
    assert list(frame.columns) == ["left", "right"]
    np.testing.assert_array_equal(frame.to_numpy(), result.maxwell)


def test_html_escapes_conductor_names(tmp_path):
    path = write_sphere(tmp_path / "<b>&x.stl", (0.0, 0.0, 0.0), m=4)
    html = bem3d.extract([path], units="mm")._repr_html_()
    assert "<b>&x" not in html and "&lt;b&gt;&amp;x" in html


def test_lengths_are_in_the_model_unit_in_and_out(spheres, tmp_path):
    """The same model given in mm and in m: the matrices equal, and every length the API
    takes (ground plane, field points) or returns (panel corners) is in the model's unit."""
    (tmp_path / "metres").mkdir()
    in_m = [write_sphere(tmp_path / "metres" / "left.stl", (0, 0, 0), scale=1e-3),
            write_sphere(tmp_path / "metres" / "right.stl", (CENTRES_MM, 0, 0), scale=1e-3)]
    mm = bem3d.extract(spheres, units="mm", ground_plane=-2.0)
    m = bem3d.extract(in_m, units="m", ground_plane=-2e-3)
    # the two files' coordinates differ by rounding, which can move a panel pair across a
    # quadrature tier (a change of ~1e-9 relative); a unit mistake would be a factor 1000
    np.testing.assert_allclose(mm.maxwell, m.maxwell, rtol=1e-8)
    np.testing.assert_allclose(mm.panels.vertices, m.panels.vertices * 1e3, rtol=1e-12,
                               atol=1e-12)
    assert np.max(np.abs(mm.panels.centroids)) < 5.0            # mm, not m
    probe_mm = np.array([[1.5, 2.0, 0.5], [1.5, 0.0, 3.0]])
    f_mm = bem3d.field(spheres, units="mm", volts={"left": 1.0}, ground_plane=-2.0,
                       at=probe_mm, points=5)
    f_m = bem3d.field(in_m, volts={"left": 1.0}, ground_plane=-2e-3, at=probe_mm * 1e-3,
                      points=5)
    np.testing.assert_allclose(f_mm.at["phi_V"], f_m.at["phi_V"], rtol=1e-8)
    e_m = f_m.at["E_V_per_m"]
    np.testing.assert_allclose(f_mm.at["E_V_per_m"], e_m, rtol=1e-8, atol=1e-8 * np.abs(e_m).max())


def test_read_reports_the_conductors_in_the_given_unit(spheres):
    geometry = bem3d.read(spheres, units="mm")
    assert geometry.names == ("left", "right") and geometry.units == "mm"
    assert geometry.report["panels"] == len(geometry.panels) == 1024
    assert geometry.panels.vertices[..., 0].max() == pytest.approx(CENTRES_MM + RADIUS_MM)


def test_save_writes_what_the_command_line_writes(spheres, tmp_path):
    result = bem3d.extract(spheres, units="mm")
    files = result.save(tmp_path / "saved")
    assert sorted(f.name for f in files) == sorted(
        ["result.json", "capacitance.csv", "bem3d_capacitance.cir", "surface.vtp"])
    record = json.loads((tmp_path / "saved" / "result.json").read_text())
    np.testing.assert_allclose(record["maxwell_capacitance_F"], result.maxwell, rtol=1e-15)


def test_errors_from_python_name_keywords_not_flags(spheres):
    with pytest.raises(bem3d.ModelError) as err:
        bem3d.extract(spheres, units="mm", volts={"middle": 1.0})
    assert str(err.value).startswith("volts: no conductor named middle")
    with pytest.raises(bem3d.ModelError, match="^tol must lie between 0 and 1"):
        bem3d.extract(spheres, units="mm", tol=2.0)


def test_the_command_line_names_its_flags(spheres, tmp_path, capsys):
    code, _, err = run_cli(["extract", *spheres, "--units", "mm", "--volts", "middle=1",
                            "--out", tmp_path / "o"], capsys)
    assert code == 2 and err.startswith("bem3d: error: --volts: no conductor named middle")
    code, _, err = run_cli(["extract", *spheres, "--tol", "2", "--out", tmp_path / "o"],
                           capsys)
    assert code == 2 and err.startswith("bem3d: error: --tol must lie between 0 and 1")


def test_sweep_moves_in_the_model_unit(spheres, tmp_path, capsys):
    outcome = bem3d.sweep(spheres, units="mm", moves=[("translate", "right:x=0,1")],
                          entries=["mutual:left:right"], out=tmp_path / "sweep", workers=1)
    assert capsys.readouterr().out == "" and outcome.ok == 2 and outcome.failed == 0
    moved = [spheres[0], write_sphere(tmp_path / "right.vtu", (CENTRES_MM + 1.0, 0.0, 0.0))]
    direct = bem3d.extract(moved, units="mm")
    last = outcome.records[-1]
    # the sweep moves panels in metres, the direct run reads moved coordinates: rounding can
    # move a pair across a quadrature tier (~1e-10 relative)
    np.testing.assert_allclose(last["maxwell_capacitance_F"], direct.maxwell, rtol=1e-9)


def test_converge_extrapolates_towards_the_closed_form(tmp_path):
    path = write_sphere(tmp_path / "ball.stl", (0.0, 0.0, 0.0), m=4)
    conv = bem3d.converge([path], units="mm", refinements=1)
    exact = ref.isolated_sphere(RADIUS_MM * 1e-3)          # 4 pi eps0 a
    finest = conv.results[-1].maxwell[0, 0]
    extrapolated = float(np.ravel(conv.maxwell.value)[0])
    # flat panels inscribed in the sphere converge like h^2 from below (README, Mesh
    # convergence): one Richardson step removes most of the error
    assert abs(extrapolated / exact - 1) < 0.2 * abs(finest / exact - 1)


def test_lossy_dielectric_through_the_api(tmp_path):
    # sphere a = 1 in a shell b = 1.6 of eps_r 3.5 (1 - j 0.02): C* = 4 pi eps0 /
    # ((1 - 1/b)/eps* + 1/b) from Gauss's law (Jackson, Classical Electrodynamics, 3rd ed.
    # 1999, sec. 4.4); the same numbers whichever unit the meshes are read in
    ball, shell = tmp_path / "ball.stl", tmp_path / "shell.stl"
    for path, radius in ((ball, 1.0), (shell, 1.6)):
        p, t = shapes.octahedral_sphere(radius, 6)
        meshio.write(path, meshio.Mesh(p, [("triangle", t)]))
    result = bem3d.extract(ball, dielectrics={shell: (3.5, 0.02)}, frequency=1e5)
    c = 4 * np.pi * ref.EPS0 / ((1 - 1 / 1.6) / (3.5 * (1 - 0.02j)) + 1 / 1.6)
    assert result.frequency == 1e5
    assert result.conductance[0, 0] == pytest.approx(-2 * np.pi * 1e5 * c.imag, rel=5e-2)
    assert "conductance" in result._repr_html_()
    assert result.to_dataframe("conductance").iloc[0, 0] == result.conductance[0, 0]
    assert bem3d.extract(ball, dielectrics={shell: 3.5}).conductance is None
    defaulted = bem3d.extract(ball, dielectrics={shell: (3.5, 0.02)})
    assert defaulted.frequency == 1e6 and any("frequency" in w for w in defaulted.warnings)
