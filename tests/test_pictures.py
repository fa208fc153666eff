"""Pictures: one PNG per slice, named in the mesh unit, and the conductor outlines drawn on it."""

import matplotlib.image
import meshio
import numpy as np
import pytest

import bem3d
from bem3d.export.sweep_summary import entry_column, plot_summary
from bem3d.geometry import shapes
from bem3d.geometry.plane_cut import footprint, plane_cut

# A unit square plate in the plane y = 0, split along its diagonal (0,0,0)-(1,0,1).
SQUARE = np.array([[[0, 0, 0], [1, 0, 0], [1, 0, 1]],
                   [[0, 0, 0], [1, 0, 1], [0, 0, 1]]], float)


def _length(segments):
    return float(np.linalg.norm(segments[:, 1] - segments[:, 0], axis=1).sum())


def test_square_plate_cut_by_a_plane_gives_the_exact_segment():
    # worked by hand: z = 0.25 crosses the plate along x in [0, 1]; the diagonal meets it at
    # x = 0.25, splitting the cross-section between the two triangles
    segments, panel = plane_cut(SQUARE, 2, 0.25)
    assert sorted(panel) == [0, 1]
    assert np.allclose(segments[:, :, 1], 0.0) and np.allclose(segments[:, :, 2], 0.25)
    xs = sorted(tuple(sorted(s[:, 0])) for s in segments)
    assert xs == [pytest.approx((0.0, 0.25)), pytest.approx((0.25, 1.0))]
    assert _length(segments) == pytest.approx(1.0)


def test_tilted_plate_and_planes_through_corners_and_edges():
    # worked by hand: the plate z = x over the unit square meets z = 0.5 along x = 0.5, y in [0, 1]
    tilted = np.array([[[0, 0, 0], [1, 0, 1], [1, 1, 1]], [[0, 0, 0], [1, 1, 1], [0, 1, 0]]], float)
    segments, _ = plane_cut(tilted, 2, 0.5)
    assert np.allclose(segments[:, :, 0], 0.5) and _length(segments) == pytest.approx(1.0)
    ys = np.sort(segments[:, :, 1].ravel())
    assert ys[0] == pytest.approx(0.0) and ys[-1] == pytest.approx(1.0)
    # the plane through the top edge z = 1 gives that edge once (one triangle holds it)
    segments, panel = plane_cut(SQUARE, 2, 1.0)
    assert list(panel) == [1] and _length(segments) == pytest.approx(1.0)
    # x = 1 holds the edge (1,0,0)-(1,0,1) and touches the other triangle at one corner only
    segments, panel = plane_cut(SQUARE, 0, 1.0)
    assert list(panel) == [0] and _length(segments) == pytest.approx(1.0)
    # a plane missing the plate, and the plate's own plane, give no cross-section
    assert len(plane_cut(SQUARE, 2, 1.5)[0]) == 0 and len(plane_cut(SQUARE, 1, 0.0)[0]) == 0


def test_footprint_is_the_border_of_a_sheet_beside_the_plane():
    # worked by hand: the square's four sides (perimeter 4), not its inner diagonal
    segments, _ = footprint(SQUARE, 1, 0.1, reach=0.2)
    assert len(segments) == 4 and _length(segments) == pytest.approx(4.0)
    assert np.allclose(segments[:, :, 1], 0.1)                  # drawn on the slice plane
    assert len(footprint(SQUARE, 1, 0.5, reach=0.2)[0]) == 0      # too far away


def test_one_png_per_slice_named_in_the_mesh_unit(tmp_path):
    left = tmp_path / "left.stl"
    right = tmp_path / "right.stl"
    for target, centre in ((left, (0, 0, 0)), (right, (3.0, 0, 0))):
        p, t = shapes.octahedral_sphere(1.0, 3, center=centre)
        meshio.write(target, meshio.Mesh(p, [("triangle", t)]))
    out = tmp_path / "out"
    result = bem3d.field([left, right], units="mm", volts={"left": 1.0}, points=15,
                         slices=["z=0.25", "x=1.5"], png=True, out=out, cache=False)
    assert result.picture_problems == []
    names = sorted(p.name for p in out.glob("*.png"))
    assert names == ["field_slice_x_1.5mm.png", "field_slice_z_0.25mm.png",
                     "surface_charge.png"]
    for name in names:
        image = matplotlib.image.imread(out / name)        # a PNG that reads back
        assert image.ndim == 3 and min(image.shape[:2]) > 100


def test_sweep_plot_with_a_failed_case_and_a_warning_reads_back(tmp_path):
    entry = ("mutual", "bottom", "top")
    rows = [{"case": i, "label": f"case{i}", "status": status, "gap_mm": gap,
             entry_column(entry): "" if status == "failed" else f"{1e-13 / (1 + gap):.9e}",
             "warnings": "under-resolved gap" if i == 0 else ""}
            for i, (status, gap) in enumerate([("ok", 0.0), ("failed", 0.5), ("ok", 1.0)])]
    target = plot_summary(rows, "gap_mm", [], [entry], tmp_path / "summary.png")
    assert target == tmp_path / "summary.png"
    assert matplotlib.image.imread(target).ndim == 3
    # nothing finished: no picture
    assert plot_summary(rows[1:2], "gap_mm", [], [entry], tmp_path / "none.png") is None
    assert not (tmp_path / "none.png").exists()
