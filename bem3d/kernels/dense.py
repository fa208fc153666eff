"""Dense matrices: the Galerkin single-layer matrix, less the mirror images' term over a grounded
plane, and the normal-field rows of dielectric interfaces."""

import numpy as np
from numba import njit, prange

from bem3d.kernels.entries import PAIR_RULE, block_entries
from bem3d.kernels.pairs import moment_pair, pair_integral


@njit(cache=True)
def _image_row(k, out, data):
    # out[k, :k + 1] -= the pair integrals of panel k with the mirror images
    d = data
    verts, normals, centroids, radii, areas = d.verts, d.normals, d.centroids, d.radii, d.areas
    moments, pts_hi, pts_near, pts_mid = d.moments, d.pts_hi, d.pts_near, d.pts_mid
    i_verts, i_normals, i_centroids = d.image_verts, d.image_normals, d.image_centroids
    i_moments, i_pts_hi = d.image_moments, d.image_pts_hi
    i_pts_near, i_pts_mid = d.image_pts_near, d.image_pts_mid
    w_hi, w_near, w_mid, self_s, self_w = d.w_hi, d.w_near, d.w_mid, d.self_s, d.self_w
    touch, near, mid, far = d.touch, d.near, d.mid, d.far
    for l in range(k + 1):
        out[k, l] -= pair_integral(k, l, verts, normals, centroids, radii, areas, moments,
                                   pts_hi, pts_near, pts_mid, i_verts, i_normals, i_centroids,
                                   radii, areas, i_moments, i_pts_hi, i_pts_near, i_pts_mid,
                                   w_hi, w_near, w_mid, self_s, self_w, touch, near, mid, far,
                                   False)


@njit(cache=True, error_model="numpy")
def _fill_row(k, out, data):
    # first the far value (moment_pair) for every pair (a branch-free loop the compiler
    # vectorises), then the few pairs inside `far` are recomputed with their proper rule
    d = data
    verts, normals, centroids, radii, areas = d.verts, d.normals, d.centroids, d.radii, d.areas
    moments, pts_hi, pts_near, pts_mid = d.moments, d.pts_hi, d.pts_near, d.pts_mid
    w_hi, w_near, w_mid, self_s, self_w = d.w_hi, d.w_near, d.w_mid, d.self_s, d.self_w
    touch, near, mid, far = d.touch, d.near, d.mid, d.far
    ck0, ck1, ck2, ak, rk = centroids[k, 0], centroids[k, 1], centroids[k, 2], areas[k], radii[k]
    for l in range(k + 1):
        a = ck0 - centroids[l, 0]
        b = ck1 - centroids[l, 1]
        c = ck2 - centroids[l, 2]
        out[k, l] = ak * areas[l] * moment_pair(a, b, c, a * a + b * b + c * c, moments, k,
                                                moments, l)
    far2 = far * far
    for l in range(k + 1):
        a = ck0 - centroids[l, 0]
        b = ck1 - centroids[l, 1]
        c = ck2 - centroids[l, 2]
        s = rk + radii[l]
        if a * a + b * b + c * c <= far2 * s * s:
            out[k, l] = pair_integral(k, l, verts, normals, centroids, radii, areas, moments,
                                      pts_hi, pts_near, pts_mid, verts, normals, centroids,
                                      radii, areas, moments, pts_hi, pts_near, pts_mid, w_hi,
                                      w_near, w_mid, self_s, self_w, touch, near, mid, far, True)


@njit(parallel=True, cache=True)
def _mirror_lower(out):
    # copy the lower triangle to the upper in tiles, so both reads and writes stay in cache
    n = out.shape[0]
    tile = 64
    nt = (n + tile - 1) // tile
    for bi in prange(nt):
        for bj in range(bi + 1):
            for i in range(bi * tile, min(n, (bi + 1) * tile)):
                for j in range(bj * tile, min(i, (bj + 1) * tile)):
                    out[j, i] = out[i, j]


def assemble_dense(out, data):
    """Fill out (n, n) with the Galerkin integrals of 1/|x - y| for every panel pair (m^3) of
    data (data.SingleLayer), less those with the panels' mirror images when data.grounded.

    Only the lower triangle is computed (row by row, contiguous), then mirrored; rows are
    paired (k, n-1-k) so that both threads get the same amount of work. The image block is
    symmetric too (reflecting both panels swaps them) and is subtracted the same way, after
    the panels' own block (method of images: each panel's image carries the opposite
    charge). Two kernels, so that a model without a plane never compiles the image one."""
    _own_block(out, data)
    if data.grounded:
        _subtract_images(out, data)


@njit(parallel=True, cache=True)
def _own_block(out, data):
    n = data.areas.shape[0]
    for i in prange((n + 1) // 2):
        i = np.int64(i)          # prange indices may be unsigned; keep index arithmetic signed
        _fill_row(i, out, data)
        j = n - 1 - i
        if j != i:
            _fill_row(j, out, data)
    _mirror_lower(out)


@njit(parallel=True, cache=True)
def _subtract_images(out, data):
    n = data.areas.shape[0]
    for i in prange((n + 1) // 2):
        i = np.int64(i)
        _image_row(i, out, data)
        j = n - 1 - i
        if j != i:
            _image_row(j, out, data)
    _mirror_lower(out)


@njit(parallel=True, cache=True)
def assemble_normal_field(out, field):
    """out (m, n): every row of the normal-field operator (data.NormalField), each entry as
    the compressed operator's near blocks compute it (points.normal_field_entry, less the
    mirror image's when field.grounded)."""
    n = out.shape[1]
    for i in prange(out.shape[0]):
        block_entries(i, 0, 0, 1, n, out[i], field, PAIR_RULE)
