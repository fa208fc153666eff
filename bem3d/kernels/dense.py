"""The dense Galerkin single-layer matrix, and the mirror images of a grounded plane."""

import numpy as np
from numba import njit, prange

from bem3d.kernels.pairs import moment_pair, pair_integral, panel_pair_integral


@njit(cache=True)
def _image_row(k, out, verts, normals, centroids, radii, areas, moments, pts_hi, w_hi,
               pts_near, w_near, pts_mid, w_mid, self_s, self_w, touch, near, mid, far,
               i_verts, i_normals, i_centroids, i_moments, i_pts_hi, i_pts_near, i_pts_mid):
    for l in range(k + 1):
        out[k, l] -= pair_integral(k, l, verts, normals, centroids, radii, areas, moments, pts_hi,
                           pts_near, pts_mid, i_verts, i_normals, i_centroids, radii, areas,
                           i_moments, i_pts_hi, i_pts_near, i_pts_mid, w_hi, w_near, w_mid,
                           self_s, self_w, touch, near, mid, far, False)


@njit(parallel=True, cache=True)
def subtract_images(out, verts, normals, centroids, radii, areas, moments,
                    pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid, self_s, self_w,
                    touch, near, mid, far,
                    i_verts, i_normals, i_centroids, i_moments, i_pts_hi, i_pts_near, i_pts_mid):
    """out[k, l] -= int_Tk int_Tl' 1/|x - y| for the mirror images l' of the panels in a
    grounded plane (method of images: each panel's image carries the opposite charge).
    The image block is symmetric (reflecting both panels swaps them), so its lower triangle is
    computed and the result mirrored. The image arrays share areas and radii with the panels."""
    n = areas.shape[0]
    for i in prange((n + 1) // 2):
        i = np.int64(i)          # prange indices may be unsigned; keep index arithmetic signed
        _image_row(i, out, verts, normals, centroids, radii, areas, moments, pts_hi, w_hi,
                   pts_near, w_near, pts_mid, w_mid, self_s, self_w, touch, near, mid, far,
                   i_verts, i_normals, i_centroids, i_moments, i_pts_hi, i_pts_near, i_pts_mid)
        j = n - 1 - i
        if j != i:
            _image_row(j, out, verts, normals, centroids, radii, areas, moments, pts_hi, w_hi,
                       pts_near, w_near, pts_mid, w_mid, self_s, self_w, touch, near, mid, far,
                       i_verts, i_normals, i_centroids, i_moments, i_pts_hi, i_pts_near,
                       i_pts_mid)
    _mirror_lower(out)


@njit(cache=True, error_model="numpy")
def _fill_row(k, out, verts, normals, centroids, radii, areas, moments,
              pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid, self_s, self_w, touch, near, mid, far):
    # first the far value (moment_pair) for every pair (a branch-free loop the compiler
    # vectorises), then the few pairs inside `far` are recomputed with their proper rule
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
            out[k, l] = panel_pair_integral(k, l, verts, normals, centroids, radii, areas,
                                            moments, pts_hi, w_hi, pts_near, w_near, pts_mid,
                                            w_mid, self_s, self_w, touch, near, mid, far)


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


@njit(parallel=True, cache=True)
def assemble_dense(out, verts, normals, centroids, radii, areas, moments,
                   pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid, self_s, self_w, touch, near, mid, far):
    """Fill out (n, n) with the Galerkin integrals of 1/|x - y| for every panel pair (m^3).

    Only the lower triangle is computed (row by row, contiguous), then mirrored; rows are paired (k, n-1-k) so that both
    threads get the same amount of work."""
    n = areas.shape[0]
    for i in prange((n + 1) // 2):
        i = np.int64(i)          # prange indices may be unsigned; keep index arithmetic signed
        _fill_row(i, out, verts, normals, centroids, radii, areas, moments,
                  pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid, self_s, self_w, touch, near, mid, far)
        j = n - 1 - i
        if j != i:
            _fill_row(j, out, verts, normals, centroids, radii, areas, moments,
                      pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid, self_s, self_w, touch, near, mid, far)
    _mirror_lower(out)
