"""Tests for bem3d.mesh_io: reading conductors from surface meshes, and the checks a file meets.

Every mesh is made here with meshio.write; every expected number is a closed form noted beside it.
"""

import math
import warnings

import meshio
import numpy as np
import pytest
from conftest import TET_POINTS, TET_TRIS

from bem3d.base.errors import Bem3dError, MeshError, ModelError
from bem3d.geometry.panels import Panels
from bem3d.geometry.quality import mesh_summary
from bem3d.mesh_io.read import read_conductors

# The corner tetrahedron's surface (conftest): three right triangles of legs 1 (area 1/2 each)
# and an equilateral triangle of side sqrt(2) (area sqrt(3)/4 * 2), closed form.
TET_AREA = 1.5 + math.sqrt(3) / 2

# meshio's writers warn about things our tiny meshes do not need (missing tags, int64 casts).
pytestmark = pytest.mark.filterwarnings("ignore")


def two_tets(shift=(3.0, 0.0, 0.0)):
    """Points and triangles of the corner tetrahedron and a copy moved by shift."""
    points = np.vstack([TET_POINTS, TET_POINTS + np.asarray(shift)])
    return points, np.vstack([TET_TRIS, TET_TRIS + 4])


def write(path, points, cells, file_format=None, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        meshio.write(path, meshio.Mesh(points, cells, **kwargs), file_format=file_format)
    return path


FORMATS = [("msh", "gmsh22"), ("msh", "gmsh"), ("stl", None), ("obj", None), ("ply", None),
           ("off", None), ("vtk", None), ("vtu", None), ("mesh", None)]


@pytest.mark.parametrize("ext, file_format", FORMATS)
def test_every_format_reads_the_same_two_components(tmp_path, ext, file_format):
    points, tris = two_tets()
    path = write(tmp_path / f"pair.{ext}", points, [("triangle", tris)], file_format)
    panels, found_warnings = read_conductors(path)
    assert found_warnings == []
    assert panels.names == ("c1", "c2")
    assert len(panels) == 8
    np.testing.assert_allclose(panels.conductor_areas(), [TET_AREA, TET_AREA], rtol=1e-12)
    # c1 is the tetrahedron holding the lexicographically lowest corner, the one at the origin.
    assert np.all(panels.centroids[panels.owner == 0][:, 0] < 1)


def test_component_order_follows_geometry_not_cell_order(tmp_path):
    points, tris = two_tets(shift=(-5.0, 0.0, 0.0))
    path = write(tmp_path / "pair.stl", points, [("triangle", tris)])
    panels, _ = read_conductors(path)
    # The moved copy has the lowest corner (x = -5), so it is c1 although its cells come last;
    # panels are listed conductor by conductor.
    assert panels.names == ("c1", "c2")
    assert np.all(panels.centroids[panels.owner == 0][:, 0] < -3)
    assert np.all(np.diff(panels.owner) >= 0)


def test_single_conductor_is_named_by_the_file_stem(tmp_path):
    path = write(tmp_path / "electrode.ply", TET_POINTS, [("triangle", TET_TRIS)])
    panels, _ = read_conductors(path)
    assert panels.names == ("electrode",)


@pytest.mark.parametrize("file_format", ["gmsh22", "gmsh"])
def test_gmsh_physical_names_ordered_by_tag(tmp_path, file_format):
    points, tris = two_tets()
    # The tetrahedron at the origin is physical group 2 ("top"), the other group 1 ("bottom");
    # a line in group 3 is not a surface and must be skipped.
    cells = [("triangle", tris[4:]), ("triangle", tris[:4])]
    tags = [np.array([1] * 4), np.array([2] * 4)]
    kwargs = dict(cell_data={"gmsh:physical": tags, "gmsh:geometrical": tags},
                  field_data={"bottom": np.array([1, 2]), "top": np.array([2, 2])})
    if file_format == "gmsh":  # the 4.1 writer needs each node's entity when there are blocks
        kwargs["point_data"] = {"gmsh:dim_tags": np.array([[2, 2]] * 4 + [[2, 1]] * 4)}
    path = write(tmp_path / "groups.msh", points, cells, file_format, **kwargs)
    panels, _ = read_conductors(path)
    assert panels.names == ("bottom", "top")
    assert np.all(panels.centroids[panels.owner == 0][:, 0] > 2)  # "bottom" is the moved copy
    np.testing.assert_allclose(panels.conductor_areas(), [TET_AREA, TET_AREA], rtol=1e-12)


def test_one_physical_group_holding_two_bodies_is_one_conductor(tmp_path):
    points, tris = two_tets()
    tags = [np.array([4] * 8)]
    path = write(tmp_path / "wired.msh", points, [("triangle", tris)], "gmsh22",
                 cell_data={"gmsh:physical": tags, "gmsh:geometrical": tags},
                 field_data={"both": np.array([4, 2])})
    panels, _ = read_conductors(path)
    assert panels.names == ("both",)
    # Two tetrahedron surfaces, closed form.
    np.testing.assert_allclose(panels.conductor_areas(), [2 * TET_AREA], rtol=1e-12)


@pytest.mark.parametrize("ext, key", [("vtu", "conductor"), ("vtk", "tag"),
                                      ("vtu", "CellEntityIds"), ("mesh", "medit:ref")])
def test_integer_cell_tags(tmp_path, ext, key):
    points, tris = two_tets()
    path = write(tmp_path / f"tagged.{ext}", points, [("triangle", tris)],
                 cell_data={key: [np.array([7] * 4 + [5] * 4)]})
    panels, _ = read_conductors(path)
    assert panels.names == ("tag5", "tag7")
    assert np.all(panels.centroids[panels.owner == 0][:, 0] > 2)   # tag 5: the moved copy


def test_tags_split_touching_parts_that_components_cannot(tmp_path):
    # Two faces of the tetrahedron tagged apart: the tags decide, even though the faces share an
    # edge; the shared edge then makes the two conductors touch, which is an error.
    path = write(tmp_path / "faces.vtu", TET_POINTS, [("triangle", TET_TRIS)],
                 cell_data={"conductor": [np.array([1, 1, 2, 2])]})
    with pytest.raises(MeshError, match=r"faces\.vtu.*'tag1' and 'tag2' touch"):
        read_conductors(path)
    panels, _ = read_conductors(path, check=False)
    assert panels.names == ("tag1", "tag2")


def test_several_files_one_conductor_each_in_the_given_order(tmp_path):
    points, tris = two_tets()
    b = write(tmp_path / "b.stl", points, [("triangle", tris)])  # two bodies, still one conductor
    a = write(tmp_path / "a.obj", TET_POINTS + [0, 5, 0], [("triangle", TET_TRIS)])
    panels, _ = read_conductors([b, a])
    assert panels.names == ("b", "a")
    np.testing.assert_allclose(panels.conductor_areas(), [2 * TET_AREA, TET_AREA], rtol=1e-12)
    panels, _ = read_conductors([b, a], names=["gate", "drain"])
    assert panels.names == ("gate", "drain")


def test_stem_collision_is_an_error_unless_names_are_given(tmp_path):
    (tmp_path / "x").mkdir()
    first = write(tmp_path / "plate.stl", TET_POINTS, [("triangle", TET_TRIS)])
    second = write(tmp_path / "x" / "plate.ply", TET_POINTS + 5, [("triangle", TET_TRIS)])
    with pytest.raises(ModelError, match=r"plate\.stl.*plate\.ply.*'plate'"):
        read_conductors([first, second])
    panels, _ = read_conductors([first, second], names=["p1", "p2"])
    assert panels.names == ("p1", "p2")


def test_wrong_number_of_names(tmp_path):
    points, tris = two_tets()
    path = write(tmp_path / "pair.stl", points, [("triangle", tris)])
    with pytest.raises(ModelError, match=r"pair\.stl: 1 conductor names given but 2"):
        read_conductors(path, names=["only"])


def test_quads_are_split_along_the_shorter_diagonal(tmp_path):
    # Quad a(0,0) b(1,0) c(3,1) d(0,1): diagonal ac = sqrt(10), bd = sqrt(2), so it is cut along
    # bd. Area by the shoelace formula: (0 + 1 + 3 + 0) / 2 = 2.
    points = np.array([[0, 0, 0], [1, 0, 0], [3, 1, 0], [0, 1, 0]], dtype=float)
    path = write(tmp_path / "quad.vtu", points, [("quad", np.array([[0, 1, 2, 3]]))])
    panels, _ = read_conductors(path)
    assert len(panels) == 2
    assert panels.areas.sum() == pytest.approx(2.0, rel=1e-12)
    for tri in panels.vertices:
        corners = {tuple(p) for p in tri}
        assert {(1.0, 0.0, 0.0), (0.0, 1.0, 0.0)} <= corners
    np.testing.assert_allclose(panels.normals, [[0, 0, 1], [0, 0, 1]])  # orientation kept


def test_unit_square_quads_area(tmp_path):
    # Two unit squares of quads (area 1 each, closed form), 3 apart along x.
    points = np.array([[0, 0, 0], [1, 0, 0], [1, 1, 0], [0, 1, 0]], dtype=float)
    points = np.vstack([points, points + [3, 0, 0]])
    quads = np.array([[0, 1, 2, 3], [4, 5, 6, 7]])
    path = write(tmp_path / "plates.vtk", points, [("quad", quads)])
    panels, _ = read_conductors(path)
    np.testing.assert_allclose(panels.conductor_areas(), [1.0, 1.0], rtol=1e-12)


def test_millimetres_become_metres(tmp_path):
    path = write(tmp_path / "tet.stl", TET_POINTS, [("triangle", TET_TRIS)])
    metres, _ = read_conductors(path)
    mm, _ = read_conductors(path, units="mm")
    np.testing.assert_allclose(mm.vertices, metres.vertices * 1e-3)  # 1 mm = 1e-3 m
    assert mm.conductor_areas()[0] == pytest.approx(TET_AREA * 1e-6, rel=1e-12)


def test_other_cells_are_skipped_with_a_warning(tmp_path):
    cells = [("triangle", TET_TRIS), ("line", np.array([[0, 1], [1, 2]])),
             ("vertex", np.array([[3]])), ("tetra", np.array([[0, 1, 2, 3]]))]
    path = write(tmp_path / "mixed.vtu", TET_POINTS, cells)
    panels, found_warnings = read_conductors(path)
    assert len(panels) == 4
    assert len(found_warnings) == 1
    message = found_warnings[0]
    assert message.startswith(str(path))
    assert "2 line" in message and "1 vertex" in message and "1 tetra" in message


def test_second_order_triangles_keep_their_corners(tmp_path):
    # Mid-edge nodes appended after the corners, as meshio orders triangle6.
    mid = (TET_POINTS[TET_TRIS] + TET_POINTS[np.roll(TET_TRIS, -1, axis=1)]) / 2
    points = np.vstack([TET_POINTS, mid.reshape(-1, 3)])
    cells = np.column_stack([TET_TRIS, 4 + np.arange(12).reshape(4, 3)])
    path = write(tmp_path / "curved.vtu", points, [("triangle6", cells)])
    panels, found_warnings = read_conductors(path)
    assert panels.conductor_areas()[0] == pytest.approx(TET_AREA, rel=1e-12)
    assert "4 triangle6" in found_warnings[0]


# --- bad input: the right error class, and a one-line message naming the file and problem ---

def assert_one_line(error, path):
    text = str(error.value)
    assert "\n" not in text
    assert text.startswith(str(path))
    assert isinstance(error.value, Bem3dError)


def test_missing_file(tmp_path):
    path = tmp_path / "absent.stl"
    with pytest.raises(MeshError, match="file not found") as error:
        read_conductors(path)
    assert_one_line(error, path)


@pytest.mark.parametrize("name", ["junk.msh", "junk.stl", "junk.vtu", "junk.obj", "junk.xyz"])
def test_garbage_bytes(tmp_path, name):
    path = tmp_path / name
    path.write_bytes(bytes(range(256)) * 3)
    with pytest.raises(MeshError, match="cannot read as a mesh") as error:
        read_conductors(path)
    assert_one_line(error, path)


def test_unknown_unit(tmp_path):
    path = write(tmp_path / "tet.stl", TET_POINTS, [("triangle", TET_TRIS)])
    with pytest.raises(ModelError, match="unknown length unit 'furlong'.*mm") as error:
        read_conductors(path, units="furlong")
    assert_one_line(error, path)


def test_no_surface_cells(tmp_path):
    path = write(tmp_path / "wire.vtu", TET_POINTS, [("line", np.array([[0, 1], [1, 2]]))])
    with pytest.raises(MeshError, match=r"no surface cells.*2 line") as error:
        read_conductors(path)
    assert_one_line(error, path)


def test_nan_coordinate(tmp_path):
    points = TET_POINTS.copy()
    points[2, 1] = np.nan
    path = write(tmp_path / "nan.vtu", points, [("triangle", TET_TRIS)])
    # Point 2 is a corner of three of the four faces.
    with pytest.raises(MeshError, match="3 panel.*NaN or infinite") as error:
        read_conductors(path)
    assert_one_line(error, path)


def test_zero_area_triangle(tmp_path):
    points = np.vstack([TET_POINTS, [[0.5, 0.5, 0.0]]])  # on the edge from e_x to e_y
    tris = np.vstack([TET_TRIS, [[1, 4, 2]]])
    path = write(tmp_path / "sliver.ply", points, [("triangle", tris)])
    where = r"1 zero-area panel.*panel 4.*\(0\.5, 0\.5, 0\) m"  # centroid of the sliver
    with pytest.raises(MeshError, match=where) as error:
        read_conductors(path)
    assert_one_line(error, path)


def test_duplicate_triangle_in_any_corner_order(tmp_path):
    tris = np.vstack([TET_TRIS, [[2, 3, 1]]])  # face (1, 2, 3) again, rotated
    path = write(tmp_path / "twice.obj", TET_POINTS, [("triangle", tris)])
    with pytest.raises(MeshError, match="1 duplicate panel") as error:
        read_conductors(path)
    assert_one_line(error, path)


def test_duplicate_found_across_stl_facets(tmp_path):
    # STL stores every facet's own corners, so the duplicate is found only after merging points.
    tris = np.vstack([TET_TRIS, [[3, 2, 1]]])  # reversed orientation counts as the same panel
    path = write(tmp_path / "twice.stl", TET_POINTS, [("triangle", tris)])
    with pytest.raises(MeshError, match="duplicate panel"):
        read_conductors(path)


@pytest.mark.parametrize("shift, why", [((1.0, 0.0, 0.0), "share the corner (1, 0, 0)"),
                                        ((0.2, 0.2, 0.2), "faces cross, no shared corner"),
                                        ((0.1, 0.1, 0.1), "a corner inside the other body")])
def test_touching_or_overlapping_conductors(tmp_path, shift, why):
    a = write(tmp_path / "left.stl", TET_POINTS, [("triangle", TET_TRIS)])
    b = write(tmp_path / "right.vtu", TET_POINTS + shift, [("triangle", TET_TRIS)])
    with pytest.raises(MeshError, match="'left' and 'right' touch or overlap") as error:
        read_conductors([a, b])
    assert str(error.value).startswith(f"{a}, {b}:"), why


def test_touching_within_one_file_names_the_file(tmp_path):
    points, tris = two_tets(shift=(1.0, 0.0, 0.0))  # share the corner (1, 0, 0): one component
    tags = {"conductor": [np.array([1] * 4 + [2] * 4)]}
    path = write(tmp_path / "pair.vtu", points, [("triangle", tris)], cell_data=tags)
    with pytest.raises(MeshError, match="'tag1' and 'tag2' touch") as error:
        read_conductors(path)
    assert_one_line(error, path)


def test_mesh_summary_of_two_tetrahedra(tmp_path):
    points, tris = two_tets()
    path = write(tmp_path / "pair.vtu", points, [("triangle", tris)])
    panels, _ = read_conductors(path)
    summary = mesh_summary(panels, path)
    assert summary["panels"] == 8
    assert [c["name"] for c in summary["conductors"]] == ["c1", "c2"]
    assert summary["conductors"][0]["area_m2"] == pytest.approx(TET_AREA, rel=1e-12)
    assert summary["conductors"][0]["boundary_edges"] == 0  # closed surface
    assert summary["bounding_box_m"] == [[0, 0, 0], [4, 1, 1]]
    # Smallest: a right triangle of legs 1 (area 1/2, shortest edge 1); largest: the equilateral
    # face of side sqrt(2) (area sqrt(3)/2, longest edge sqrt(2)).
    assert summary["smallest_panel"] == pytest.approx({"area_m2": 0.5, "edge_m": 1.0})
    assert summary["largest_panel"] == pytest.approx({"area_m2": math.sqrt(3) / 2,
                                                       "edge_m": math.sqrt(2)})
    assert summary["problems"] == []


# --- orientation ---------------------------------------------------------------------------------

def outward_share(panels, centre):
    """Share of panels whose normal points away from centre (outward for a convex body)."""
    return float(np.mean(np.einsum("ij,ij->i", panels.normals, panels.centroids - centre) > 0))


@pytest.mark.parametrize("flip", [[0], [1, 3], [0, 1, 2, 3]])
def test_closed_surfaces_are_turned_to_face_outward(tmp_path, flip):
    tris = TET_TRIS.copy()
    tris[flip] = tris[flip, ::-1]
    path = write(tmp_path / "tet.obj", TET_POINTS, [("triangle", tris)])
    panels, found_warnings = read_conductors(path)
    # the tetrahedron is convex: outward normals point away from its centroid (geometry)
    assert outward_share(panels, TET_POINTS.mean(axis=0)) == 1.0
    assert found_warnings == [f"{path}: conductor 'tet': {len(flip)} of 4 panels reversed so "
                              "that they face out of the conductor and agree with their "
                              "neighbours"]


def test_a_cavity_wall_faces_into_the_cavity(tmp_path):
    # A thick spherical shell: outer surface r = 2, cavity wall r = 1, both written facing away
    # from the centre. Out of the conductor's material means away from the centre outside and
    # towards it on the cavity wall.
    from bem3d.geometry import shapes

    outer, inner = shapes.octahedral_sphere(2.0, 3), shapes.octahedral_sphere(1.0, 3)
    points, tris = shapes.merge(outer, inner)
    tags = [np.ones(len(tris), int)]
    path = write(tmp_path / "shell.msh", points, [("triangle", tris)], "gmsh22",
                 cell_data={"gmsh:physical": tags, "gmsh:geometrical": tags},
                 field_data={"shell": np.array([1, 2])})
    panels, found_warnings = read_conductors(path)
    r = np.linalg.norm(panels.centroids, axis=1)
    away = np.einsum("ij,ij->i", panels.normals, panels.centroids) > 0
    assert np.all(away[r > 1.5]) and not np.any(away[r < 1.5])
    assert "72 of 144 panels reversed" in found_warnings[0]           # the 72 cavity panels


def test_an_open_sheet_keeps_the_orientation_most_panels_had(tmp_path):
    # Eight panels of a unit square in z = 0; three of them are written reversed.
    from bem3d.geometry import shapes

    points, tris = shapes.rectangle(1.0, 1.0, 2, 2)
    tris = np.asarray(tris).copy()
    tris[[1, 4, 6]] = tris[[1, 4, 6], ::-1]
    path = write(tmp_path / "sheet.ply", np.asarray(points), [("triangle", tris)])
    panels, found_warnings = read_conductors(path)
    unflipped = Panels(np.asarray(points)[np.asarray(shapes.rectangle(1.0, 1.0, 2, 2)[1])],
                       np.zeros(8, int), ("sheet",))
    # all face the way the five unflipped ones did
    np.testing.assert_allclose(panels.normals, unflipped.normals)
    assert "3 of 8 panels reversed" in found_warnings[0]


def test_a_surface_that_cannot_be_oriented_is_left_as_read(tmp_path):
    # A Moebius strip of 10 quads (20 panels) has one side only (topology).
    u = np.linspace(0, 2 * np.pi, 11)[:-1]
    def ring(w):
        return np.column_stack([(2 + w * np.cos(u / 2)) * np.cos(u),
                                (2 + w * np.cos(u / 2)) * np.sin(u), w * np.sin(u / 2)])
    points = np.vstack([ring(-0.5), ring(0.5)])
    quads = [[k, (k + 1) % 10, 10 + (k + 1) % 10, 10 + k] for k in range(9)] + [[9, 10, 0, 19]]
    path = write(tmp_path / "strip.vtk", points, [("quad", np.array(quads))])
    panels, found_warnings = read_conductors(path)
    assert len(panels) == 20
    assert any("cannot be oriented consistently" in w for w in found_warnings)
    assert not any("reversed" in w for w in found_warnings)


def test_corner_and_cell_order_do_not_change_the_panels(tmp_path):
    # The same surfaces listed from other corners and in another order are the same input:
    # the panels bem3d builds must be identical, bit for bit (the quadrature depends on order).
    points, tris = two_tets()
    rng = np.random.default_rng(3)
    shuffled = np.roll(tris, 1, axis=1)[rng.permutation(len(tris))]
    a, _ = read_conductors(write(tmp_path / "a.vtu", points, [("triangle", tris)]))
    b, _ = read_conductors(write(tmp_path / "b.vtu", points, [("triangle", shuffled)]))
    np.testing.assert_array_equal(a.vertices, b.vertices)
    np.testing.assert_array_equal(a.owner, b.owner)


# --- what the content says, and what a header promises --------------------------------------

def test_content_decides_the_format_not_the_extension(tmp_path):
    right = write(tmp_path / "tet.obj", TET_POINTS, [("triangle", TET_TRIS)])
    wrong = tmp_path / "tet.stl"
    wrong.write_bytes(right.read_bytes())
    a, _ = read_conductors(right)
    b, found_warnings = read_conductors(wrong)
    np.testing.assert_array_equal(a.vertices, b.vertices)
    assert found_warnings == [f"{wrong}: the content is OBJ although its name ends in '.stl'; "
                              "read it as OBJ"]


@pytest.mark.parametrize("text, words", [
    (b"", "the file is empty"),
    (b"OFF\n# cut here\n", "no vertex and face counts"),
    (b"ply\nformat ascii 1.0\nelement vertex 3\n", "no end_header"),
    (b"OFF\n4000000000 4 0\n0 0 0\n", "promises 4,000,000,000 vertices but the file holds only"),
    (b"solid x\nfacet normal 0 0 1\n outer loop\n  vertex 0 0 0\n",
     "does not end with 'endsolid'"),
    (b"v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 3", "ends in the middle of a line"),
    (b"$MeshFormat\n2.2 0 8\n$EndMeshFormat\n$Nodes\n3\n1 0 0 0\n2 1 0 0\n3 0 1 0\n$EndNodes\n"
     b"$Elements\n1\n1 2 2 0 1 1 2 0\n$EndElements\n", "refers to node 0, which does not exist"),
    (b"$MeshFormat\n4.1 0 8\n$EndMeshFormat\n$Nodes\n1 9 1 3\n2 1 0 3\n1\n2\n3\n0 0 0\n1 0 0\n"
     b"0 1 0\n$EndNodes\n$Elements\n1 1 1 1\n2 1 2 1\n1 1 2 3\n$EndElements\n",
     "promises 9 nodes but its blocks hold 3"),
])
def test_broken_files_are_refused_before_parsing(tmp_path, monkeypatch, text, words):
    # meshio's OFF and PLY readers loop forever on the first two, and would read the others
    # as some other mesh or allocate what the header says: the reader must never be called.
    path = tmp_path / "broken.mesh.txt"
    path.write_bytes(text)
    monkeypatch.setattr(meshio, "read", lambda *a, **k: pytest.fail("meshio was called"))
    with pytest.raises(MeshError, match=words) as error:
        read_conductors(path)
    assert_one_line(error, path)


@pytest.mark.parametrize("scale, shift, words", [
    (1e13, 0.0, "coordinates reach 1e\\+13 m, beyond the 1e\\+12 m bem3d accepts "
                "\\(corrupt file or wrong length unit\\?\\)$"),
    (1e-13, 0.0, "only 1.73e-13 m across, below the 1e-12 m bem3d accepts "
                 "\\(corrupt file or wrong length unit\\?\\)$"),
    (1.0, 1e11, "too small for the precision of their coordinates"),
])
def test_magnitudes_no_model_can_have_are_refused(tmp_path, scale, shift, words):
    # The tetrahedron's box diagonal is sqrt(3) = 1.73 times its edge (geometry); its edges of
    # 1 m at 1e11 m from the origin carry rounding of 1e11 * 1.1e-16 m, 1e-5 of an edge.
    path = write(tmp_path / "tet.vtu", TET_POINTS * scale + shift, [("triangle", TET_TRIS)])
    with pytest.raises(MeshError, match=words) as error:
        read_conductors(path)
    assert_one_line(error, path)


def test_subnormal_coordinates_read_like_zeros(tmp_path):
    a = write(tmp_path / "a.vtu", TET_POINTS, [("triangle", TET_TRIS)])
    b = write(tmp_path / "b.vtu", np.where(TET_POINTS == 0, 5e-324, TET_POINTS),
              [("triangle", TET_TRIS)])
    np.testing.assert_allclose(read_conductors(a)[0].vertices, read_conductors(b)[0].vertices,
                               rtol=0, atol=1e-300)


# --- accuracy warnings -----------------------------------------------------------------------

def test_thin_panels_are_reported_with_count_and_worst_location(tmp_path):
    # A unit square cut into 50 strips of 1 x 0.02, each split in two: longest edge
    # sqrt(1 + 0.02^2), height onto it 0.02 / that, so aspect (1 + 4e-4) / 0.02 = 50.02.
    from bem3d.geometry import shapes

    points, tris = shapes.rectangle(1.0, 1.0, 1, 50)
    path = write(tmp_path / "strips.obj", np.asarray(points), [("triangle", np.asarray(tris))])
    _, found_warnings = read_conductors(path)
    thin = [w for w in found_warnings if "aspect ratio" in w]
    assert len(thin) == 1 and "100 panel(s) with aspect ratio (longest edge / height) above 20" \
        in thin[0] and "up to 50" in thin[0] and " at (" in thin[0]


def test_abrupt_size_changes_are_reported(tmp_path):
    # A long panel (longest edge sqrt(1 + 100) = 10.05) beside a small one (longest edge 1)
    # across their shared edge: ratio 10.05; aspect ratios 10.1 and 2 stay below the limit.
    points = np.array([[0, 0, 0], [1, 0, 0], [0, 10, 0], [0.5, -0.5, 0]], float)
    tris = np.array([[0, 1, 2], [1, 0, 3]])
    path = write(tmp_path / "jump.obj", points, [("triangle", tris)])
    _, found_warnings = read_conductors(path)
    assert len(found_warnings) == 1
    assert "1 pair(s) of neighbouring panels differ in size by more than 3x, up to 10x" \
        in found_warnings[0]


def test_check_mesh_shows_every_accuracy_warning(tmp_path, capsys):
    # Two strip-meshed plates 0.01 m apart (panels 1 m long, so the gap is far below their
    # size) in one file, grouped by their tags: check-mesh lists both kinds of concern and the
    # shape figures, and exits 0.
    from bem3d._cli.main import main
    from bem3d.geometry import shapes

    points, tris = shapes.rectangle(1.0, 1.0, 1, 50)
    points = np.asarray(points)
    both = np.vstack([points, points + [0, 0, 0.01]])
    cells = np.vstack([tris, np.asarray(tris) + len(points)])
    tags = np.r_[np.ones(len(tris), int), 2 * np.ones(len(tris), int)]
    path = write(tmp_path / "plates.vtu", both, [("triangle", cells)],
                 cell_data={"conductor": [tags]})
    assert main(["check-mesh", str(path)]) == 0
    out = capsys.readouterr().out
    assert "conductors 'tag1' and 'tag2' come within 0.01 m" in out and "about 101x finer" in out
    assert "aspect ratio (longest edge / height) above 20" in out
    assert "largest panel aspect ratio (longest edge / height): 50" in out
