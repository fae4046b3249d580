"""Compiled loops over the 3D structured grid (numba), threaded over the cores.

Nodes are numbered in C order of (i, j, k) on a grid of (nx+1, ny+1, nz+1) nodes
and node n carries dofs 3n + c, as in grid.py; element (i, j, k) has its eight
corners in grid.H8_CORNERS order. Every array a kernel writes is owned by one
thread at a time: loops that scatter to the nodes of an element (or coarse
element) run over x-slabs in two colours, even slabs then odd ones, so no two
threads touch the same node plane; results are therefore the same on every run.

numba's workqueue threading layer (chosen below) must not be entered from two
Python threads at once, so every call goes through `_LOCK`.
"""

from __future__ import annotations

import functools
import threading

import numba as nb
import numpy as np

from .grid import H8_CORNERS

# GNU OpenMP, which numba picks when it finds it, kills a process forked after a
# parallel region ("fork() called from a process already using GNU OpenMP");
# sweeps and benchmarks fork. The built-in workqueue layer survives a fork
# (tests/test_matrixfree.py).
nb.config.THREADING_LAYER = "workqueue"
_LOCK = threading.Lock()
# Compiled code is cached next to the module (or in numba's user-wide cache when
# that folder is read-only), so only the first run on a machine compiles.
_JIT = {"cache": True, "fastmath": True, "parallel": True}


@nb.njit(cache=True)
def _corner_offsets(ny1: int, nz1: int) -> np.ndarray:
    """Node-number offsets of the eight H8 corners from the element's corner 0."""
    out = np.empty(8, np.int64)
    # (0,0,0) (1,0,0) (1,1,0) (0,1,0) (0,0,1) (1,0,1) (1,1,1) (0,1,1)
    cx = (0, 1, 1, 0, 0, 1, 1, 0)
    cy = (0, 0, 1, 1, 0, 0, 1, 1)
    cz = (0, 0, 0, 0, 1, 1, 1, 1)
    for a in range(8):
        out[a] = (cx[a] * ny1 + cy[a]) * nz1 + cz[a]
    return out


@nb.njit(**_JIT)
def _modal_product(u, moduli, ptr, idx, val, free, nx, ny, nz, y, um, ym, lines):
    """y = D K D u + (I − D) u with K = Σ_e E_e k0, k0 = B C Bᵀ in the element's
    modal basis (`modal_form`; C as CSR rows ptr, idx, val). um, ym: (columns, 3,
    nodes) scratch holding D u and K D u by column and component, so every read
    and write below is unit-stride along a z-line. Per z-line of elements and
    component: the eight corner values of each element go to the eight modes
    1, z, y, yz, x, xz, xy, xyz by three sum-and-difference stages (z, y, x;
    a butterfly, as in a fast Walsh–Hadamard transform), scaled by E_e; C acts
    on the 24 modal values; the inverse butterfly returns the corner values,
    which are added to the four node lines in eight unit-stride passes. For the
    isotropic cube C has 45 non-zeros of 576 (33 at ν = 0) (the constant modes are rigid, the
    linear, bilinear and trilinear ones decouple), so the work is about a third
    of the dense k0 product's and the passes vectorise along the line. The
    lines are taken `lines` at a time as one run of node positions (a line of
    50 elements is too short a loop to vectorise well)."""
    ny1, nz1 = ny + 1, nz + 1
    m = u.shape[1]
    nn = u.shape[0] // 3
    for node in nb.prange(nn):
        for c in range(3):
            d = 3 * node + c
            f = free[d]
            for col in range(m):
                um[col, c, node] = f * u[d, col]
                ym[col, c, node] = 0.0
    for colour in range(2):
        for ii in nb.prange((nx - colour + 1) // 2):
            i = 2 * ii + colour
            width = lines * nz1
            w = np.empty((24, width), dtype=val.dtype)
            acc = np.empty((24, width), dtype=val.dtype)
            e_at = np.empty(width, dtype=val.dtype)
            for j0 in range(0, ny, lines):
                nl = min(lines, ny - j0)
                # positions t run over the nodes of nl lines from (i, j0, 0): the
                # element at t has its corner 0 there; the top node of a line has
                # none (modulus 0, so it adds zeros), the block's last is left out
                count = nl * nz1 - 1
                for line in range(nl):
                    el0 = (i * ny + j0 + line) * nz
                    for k in range(nz):
                        e_at[line * nz1 + k] = moduli[el0 + k]
                    if line < nl - 1:
                        e_at[line * nz1 + nz] = 0.0
                b00 = (i * ny1 + j0) * nz1
                b01 = b00 + nz1
                b10 = b00 + ny1 * nz1
                b11 = b10 + nz1
                for col in range(m):
                    for c in range(3):
                        uc = um[col, c]
                        for k in range(count):
                            e = e_at[k]
                            s00 = uc[b00 + k + 1] + uc[b00 + k]
                            d00 = uc[b00 + k + 1] - uc[b00 + k]
                            s01 = uc[b01 + k + 1] + uc[b01 + k]
                            d01 = uc[b01 + k + 1] - uc[b01 + k]
                            s10 = uc[b10 + k + 1] + uc[b10 + k]
                            d10 = uc[b10 + k + 1] - uc[b10 + k]
                            s11 = uc[b11 + k + 1] + uc[b11 + k]
                            d11 = uc[b11 + k + 1] - uc[b11 + k]
                            ss0 = e * (s01 + s00)
                            ds0 = e * (s01 - s00)
                            sd0 = e * (d01 + d00)
                            dd0 = e * (d01 - d00)
                            ss1 = e * (s11 + s10)
                            ds1 = e * (s11 - s10)
                            sd1 = e * (d11 + d10)
                            dd1 = e * (d11 - d10)
                            w[c, k] = ss1 + ss0
                            w[3 + c, k] = sd1 + sd0
                            w[6 + c, k] = ds1 + ds0
                            w[9 + c, k] = dd1 + dd0
                            w[12 + c, k] = ss1 - ss0
                            w[15 + c, k] = sd1 - sd0
                            w[18 + c, k] = ds1 - ds0
                            w[21 + c, k] = dd1 - dd0
                    for r in range(24):
                        for k in range(count):
                            acc[r, k] = 0.0
                        for p in range(ptr[r], ptr[r + 1]):
                            s = idx[p]
                            v = val[p]
                            for k in range(count):
                                acc[r, k] += v * w[s, k]
                    for c in range(3):
                        for k in range(count):
                            a1 = acc[c, k] + acc[12 + c, k]
                            a0 = acc[c, k] - acc[12 + c, k]
                            b1 = acc[3 + c, k] + acc[15 + c, k]
                            b0 = acc[3 + c, k] - acc[15 + c, k]
                            g1 = acc[6 + c, k] + acc[18 + c, k]
                            g0 = acc[6 + c, k] - acc[18 + c, k]
                            h1 = acc[9 + c, k] + acc[21 + c, k]
                            h0 = acc[9 + c, k] - acc[21 + c, k]
                            # (cx, cy): the node line; p = z-sum part, q = z-difference part
                            p11, q11 = a1 + g1, b1 + h1
                            p10, q10 = a1 - g1, b1 - h1
                            p01, q01 = a0 + g0, b0 + h0
                            p00, q00 = a0 - g0, b0 - h0
                            w[c, k] = p00 - q00
                            w[3 + c, k] = p00 + q00
                            w[6 + c, k] = p01 - q01
                            w[9 + c, k] = p01 + q01
                            w[12 + c, k] = p10 - q10
                            w[15 + c, k] = p10 + q10
                            w[18 + c, k] = p11 - q11
                            w[21 + c, k] = p11 + q11
                        yc = ym[col, c]
                        for a in range(8):  # corner (cx, cy, cz) = bits of a
                            start = b00 + (a >> 2) * ny1 * nz1 + ((a >> 1) & 1) * nz1 + (a & 1)
                            for k in range(count):
                                yc[start + k] += w[3 * a + c, k]
    for node in nb.prange(nn):
        for c in range(3):
            d = 3 * node + c
            f = free[d]
            for col in range(m):
                y[d, col] = f * ym[col, c, node] + (1.0 - f) * u[d, col]


@nb.njit(**_JIT)
def _element_diagonal(moduli, k0, free, nx, ny, nz, out):
    """The diagonal of D K D + (I − D)."""
    ny1, nz1 = ny + 1, nz + 1
    offs = _corner_offsets(ny1, nz1)
    for d in nb.prange(out.shape[0]):
        out[d] = 0.0
    for colour in range(2):
        for ii in nb.prange((nx - colour + 1) // 2):
            i = 2 * ii + colour
            for j in range(ny):
                for k in range(nz):
                    e = moduli[(i * ny + j) * nz + k]
                    base = (i * ny1 + j) * nz1 + k
                    for a in range(8):
                        dof = 3 * (base + offs[a])
                        for c in range(3):
                            out[dof + c] += e * k0[3 * a + c, 3 * a + c]
    for d in nb.prange(out.shape[0]):
        f = free[d]
        out[d] = f * out[d] + (1.0 - f)


@nb.njit(cache=True, inline="always")
def _gather_element(u, base, offs, col, ue):
    """ue = the 24 displacements of the element whose corner 0 is node `base`,
    column `col` of u."""
    for a in range(8):
        dof = 3 * (base + offs[a])
        for c in range(3):
            ue[3 * a + c] = u[dof + c, col]


@nb.njit(**_JIT)
def _element_energies(u, k0, nx, ny, nz, out):
    """out[e, col] = u_eᵀ k0 u_e for every element and column of u."""
    ny1, nz1 = ny + 1, nz + 1
    offs = _corner_offsets(ny1, nz1)
    m = u.shape[1]
    for i in nb.prange(nx):
        ue = np.empty_like(k0[0])
        for j in range(ny):
            for k in range(nz):
                el = (i * ny + j) * nz + k
                base = (i * ny1 + j) * nz1 + k
                for col in range(m):
                    _gather_element(u, base, offs, col, ue)
                    total = 0.0
                    for s in range(24):
                        row = 0.0
                        for r in range(24):
                            row += k0[s, r] * ue[r]
                        total += row * ue[s]
                    out[el, col] = total


@nb.njit(**_JIT)
def _element_values(u, b, nx, ny, nz, out):
    """out[e, :, col] = b u_e for a constant (rows × 24) matrix b (element strains)."""
    ny1, nz1 = ny + 1, nz + 1
    offs = _corner_offsets(ny1, nz1)
    m = u.shape[1]
    rows = b.shape[0]
    for i in nb.prange(nx):
        ue = np.empty(24)
        for j in range(ny):
            for k in range(nz):
                el = (i * ny + j) * nz + k
                base = (i * ny1 + j) * nz1 + k
                for col in range(m):
                    _gather_element(u, base, offs, col, ue)
                    for r in range(rows):
                        s = 0.0
                        for q in range(24):
                            s += b[r, q] * ue[q]
                        out[el, r, col] = s


@nb.njit(**_JIT)
def _stencil_product(stencil, u, nx1, ny1, nz1, y):
    """y = A u for A stored by node stencils: stencil[n, i, slot, j] couples dof
    (n, i) with dof (n + offset(slot), j), slots in lexicographic order of the
    offsets (−1, 0, 1)³ (stencil.py's layout)."""
    m = u.shape[1]
    for x in nb.prange(nx1):
        acc = np.empty(3, dtype=np.float64)
        for yy in range(ny1):
            for z in range(nz1):
                n = (x * ny1 + yy) * nz1 + z
                for col in range(m):
                    acc[0] = 0.0
                    acc[1] = 0.0
                    acc[2] = 0.0
                    slot = 0
                    for dx in range(-1, 2):
                        xn = x + dx
                        for dy in range(-1, 2):
                            yn = yy + dy
                            for dz in range(-1, 2):
                                zn = z + dz
                                if 0 <= xn < nx1 and 0 <= yn < ny1 and 0 <= zn < nz1:
                                    nb_dof = 3 * ((xn * ny1 + yn) * nz1 + zn)
                                    u0 = u[nb_dof, col]
                                    u1 = u[nb_dof + 1, col]
                                    u2 = u[nb_dof + 2, col]
                                    for i in range(3):
                                        acc[i] += (
                                            stencil[n, i, slot, 0] * u0
                                            + stencil[n, i, slot, 1] * u1
                                            + stencil[n, i, slot, 2] * u2
                                        )
                                slot += 1
                    for i in range(3):
                        y[3 * n + i, col] = acc[i]


@nb.njit(**_JIT)
def _chebyshev_start(r, ax, inv_diag, c, d, x, from_zero):
    """The first Chebyshev step in a single pass. from_zero: d := c·D⁻¹r, x := d.
    Else ax := r − ax (the residual of x), d := c·D⁻¹ax, x += d."""
    m = r.shape[1]
    for i in nb.prange(r.shape[0]):
        w = c * inv_diag[i, 0]
        for col in range(m):
            if from_zero:
                step = w * r[i, col]
                x[i, col] = step
            else:
                res = r[i, col] - ax[i, col]
                ax[i, col] = res
                step = w * res
                x[i, col] += step
            d[i, col] = step


@nb.njit(**_JIT)
def _chebyshev_step(res, ad, d, x, inv_diag, c_d, c_r):
    """One Chebyshev update in a single pass: ad := res − ad (the new residual),
    d := c_d·d + c_r·D⁻¹·ad, x += d (matrixfree.chebyshev)."""
    m = res.shape[1]
    for i in nb.prange(res.shape[0]):
        w = inv_diag[i, 0]
        for col in range(m):
            r = res[i, col] - ad[i, col]
            ad[i, col] = r
            step = c_d * d[i, col] + c_r * w * r
            d[i, col] = step
            x[i, col] += step


@nb.njit(**_JIT)
def _axis_apply(ptr, idx, val, u, minus, subtract, out, add):
    """out[o, i, :] (+)= Σ_p val[p] · (u − minus)[o, idx[p], :] over the entries p
    of row i of a 1D CSR matrix: one axis of a tensor-product grid transfer.
    The trailing axis is contiguous, so every pass is unit-stride. `subtract`:
    read u − minus (a residual formed on the fly); `add`: add to out."""
    outer, n_out, inner = out.shape
    for oi in nb.prange(outer * n_out):
        o = oi // n_out
        i = oi - o * n_out
        dst = out[o, i]
        if not add:
            for k in range(inner):
                dst[k] = 0.0
        for p in range(ptr[i], ptr[i + 1]):
            w = val[p]
            src = u[o, idx[p]]
            if subtract:
                off = minus[o, idx[p]]
                for k in range(inner):
                    dst[k] += w * (src[k] - off[k])
            else:
                for k in range(inner):
                    dst[k] += w * src[k]


@nb.njit(**_JIT)
def _coarse_stencil(
    moduli,
    nx,
    ny,
    nz,
    sx,
    sy,
    sz,
    cx_code,
    cy_code,
    cz_code,
    ncy,
    ncz,
    table,
    extra_of,
    extra,
    slot_of,
    out,
):
    """Node stencils of a coarse Galerkin operator from the fine element moduli:
    each coarse element's matrix is Σ_e E_e table[code(e)] over the fine elements
    e it holds (s*[C] .. s*[C+1] − 1 along each axis), plus `extra[extra_of[C]]`
    where extra_of[C] ≥ 0; it is then scattered to the stencils of its corners."""
    cx, cy, cz = len(sx) - 1, len(sy) - 1, len(sz) - 1
    ny1, nz1 = cy + 1, cz + 1
    offs = _corner_offsets(ny1, nz1)
    for n in nb.prange(out.shape[0]):
        for i in range(3):
            for s in range(27):
                for j in range(3):
                    out[n, i, s, j] = 0.0
    for colour in range(2):
        for ii in nb.prange((cx - colour + 1) // 2):
            ci = 2 * ii + colour
            kc = np.empty((24, 24))
            for cj in range(cy):
                for ck in range(cz):
                    for r in range(24):
                        for s in range(24):
                            kc[r, s] = 0.0
                    for i in range(sx[ci], sx[ci + 1]):
                        for j in range(sy[cj], sy[cj + 1]):
                            for k in range(sz[ck], sz[ck + 1]):
                                e = moduli[(i * ny + j) * nz + k]
                                if e != 0.0:
                                    t = (cx_code[i] * ncy + cy_code[j]) * ncz + cz_code[k]
                                    for r in range(24):
                                        for s in range(24):
                                            kc[r, s] += e * table[t, r, s]
                    c = (ci * cy + cj) * cz + ck
                    x = extra_of[c]
                    if x >= 0:
                        for r in range(24):
                            for s in range(24):
                                kc[r, s] += extra[x, r, s]
                    base = (ci * ny1 + cj) * nz1 + ck
                    for a in range(8):
                        node = base + offs[a]
                        for b in range(8):
                            slot = slot_of[a, b]
                            for i in range(3):
                                for j in range(3):
                                    out[node, i, slot, j] += kc[3 * a + i, 3 * b + j]


# Node positions per run of the modal product: several z-lines at once, so that
# its loops are long enough to vectorise; measured in DEVELOPERS.md, "Matrix-free
# multigrid".
BLOCK_POSITIONS = 200


def product_scratch(n_dofs: int, columns: int, dtype) -> tuple[np.ndarray, np.ndarray]:
    """The two (columns, n_dofs) work arrays of element_product."""
    return np.empty((columns, n_dofs), dtype), np.empty((columns, n_dofs), dtype)


def modal_form(k0: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """k0 in the element's modal basis, C = Bᵀ k0 B / 64 (B: the ±1 values of the
    modes 1, z, y, yz, x, xz, xy, xyz at the H8 corners, one per component;
    BᵀB = 8 I, so k0 = B C Bᵀ), as CSR rows (ptr, idx, val in k0's dtype) with
    its structural zeros dropped. Remembered per k0 (cached on its bytes), so each
    product pays only for the lookup."""
    return _modal_form(k0.tobytes(), k0.dtype.str)


@functools.lru_cache(maxsize=16)
def _modal_form(raw: bytes, dtype: str):
    k0 = np.frombuffer(raw, dtype=dtype).reshape(24, 24).astype(float)
    sign = 2.0 * H8_CORNERS - 1.0  # corner coordinates as ±1
    bits = [((q >> 2) & 1, (q >> 1) & 1, q & 1) for q in range(8)]  # (x, y, z) powers
    phi = np.array([[np.prod(sign[a] ** np.array(b)) for b in bits] for a in range(8)])
    b = np.kron(phi, np.eye(3))
    c = b.T @ k0 @ b / 64.0
    keep = np.abs(c) > 1e-12 * np.abs(c).max()
    rows, cols = np.nonzero(keep)
    ptr = np.searchsorted(rows, np.arange(25)).astype(np.int64)
    return ptr, cols.astype(np.int64), c[rows, cols].astype(dtype)


def element_product(u, moduli, k0, free, shape, out, scratch=None):
    """out = D K D u + (I − D) u; `scratch` from product_scratch (made when None)."""
    um, ym = scratch if scratch is not None else product_scratch(u.shape[0], u.shape[1], u.dtype)
    m, n = u.shape[1], u.shape[0]
    ptr, idx, val = modal_form(k0)
    with _LOCK:
        _modal_product(
            u,
            moduli,
            ptr,
            idx,
            val,
            free,
            *shape,
            out,
            um.reshape(m, 3, n // 3),
            ym.reshape(m, 3, n // 3),
            max(1, min(shape[1], BLOCK_POSITIONS // (shape[2] + 1))),
        )
    return out


def element_diagonal(moduli, k0, free, shape, out):
    with _LOCK:
        _element_diagonal(moduli, k0, free, *shape, out)
    return out


def element_energies(u, k0, shape, out):
    with _LOCK:
        _element_energies(u, k0, *shape, out)
    return out


def element_values(u, b, shape, out):
    with _LOCK:
        _element_values(u, b, *shape, out)
    return out


def stencil_product(stencil, u, node_shape, out):
    with _LOCK:
        _stencil_product(stencil, u, *node_shape, out)
    return out


def chebyshev_start(r, ax, inv_diag, c, d, x):
    """ax None: d := c·D⁻¹r, x := d (x, d preallocated). Else ax := r − ax,
    d := c·D⁻¹ax, x += d. Returns the residual (r, or ax)."""
    with _LOCK:
        _chebyshev_start(r, r if ax is None else ax, inv_diag, d.dtype.type(c), d, x, ax is None)
    return r if ax is None else ax


def chebyshev_step(res, ad, d, x, inv_diag, c_d, c_r):
    """ad := res − ad, d := c_d·d + c_r·D⁻¹ad, x += d; returns ad (the residual)."""
    with _LOCK:
        _chebyshev_step(res, ad, d, x, inv_diag, d.dtype.type(c_d), d.dtype.type(c_r))
    return ad


def transfer_scratch(factors, columns: int, dtype) -> tuple[np.ndarray, np.ndarray]:
    """The two work arrays `tensor_apply` needs for these factors, in either
    direction (its middle results: about a half and a quarter of the fine vector)."""
    (nxo, nxi), (nyo, nyi), (nzo, nzi) = (f.shape for f in factors)
    nxf, nyf = max(nxo, nxi), max(nyo, nyi)
    nyc, nzc = min(nyo, nyi), min(nzo, nzi)
    # restriction: z, y, x (fine x·fine y·coarse z, then fine x·coarse y·coarse z);
    # prolongation: x, y, z (fine x·coarse y·coarse z, then fine x·fine y·coarse z)
    half = nxf * nyf * nzc * 3 * columns
    quarter = nxf * nyc * nzc * 3 * columns
    return np.empty(half, dtype), np.empty(quarter, dtype)  # nyf ≥ nyc: half is the larger


def tensor_apply(factors, u, out, scratch=None, minus=None, add=False):
    """out (+)= (Ax ⊗ Ay ⊗ Az ⊗ I₃)(u − minus) for three 1D sparse matrices
    (scipy CSR, x, y, z): the grid transfers (prolongation P, restriction Pᵀ)
    without forming them, one axis at a time, the shrinking axes first so the
    middle results stay small. `scratch`: transfer_scratch's arrays."""
    if not out.flags.c_contiguous:  # its reshaped views would be copies
        raise ValueError("tensor_apply writes into a C-contiguous array only")
    ax, ay, az = factors
    (nxo, nxi), (nyo, nyi), (nzo, nzi) = ax.shape, ay.shape, az.shape
    c = 3 * u.shape[1]
    if scratch is None:
        scratch = transfer_scratch(factors, u.shape[1], u.dtype)
    big, small = scratch
    sub = minus is not None
    minus = u if minus is None else minus
    with _LOCK:
        if nxo * nyo * nzo <= nxi * nyi * nzi:  # restriction: z, y, x
            t1 = big[: nxi * nyi * nzo * c].reshape(nxi * nyi, nzo, c)
            t2 = small[: nxi * nyo * nzo * c].reshape(nxi, nyo, nzo * c)
            shape_in = (nxi * nyi, nzi, c)
            _axis_apply(
                az.indptr,
                az.indices,
                az.data,
                u.reshape(shape_in),
                minus.reshape(shape_in),
                sub,
                t1,
                False,
            )
            t1 = t1.reshape(nxi, nyi, nzo * c)
            _axis_apply(ay.indptr, ay.indices, ay.data, t1, t1, False, t2, False)
            t2 = t2.reshape(1, nxi, nyo * nzo * c)
            _axis_apply(ax.indptr, ax.indices, ax.data, t2, t2, False, out.reshape(1, nxo, -1), add)
        else:  # prolongation: x, y, z
            if sub:
                raise ValueError("minus is for restrictions")
            t1 = small[: nxo * nyi * nzi * c].reshape(1, nxo, nyi * nzi * c)
            t2 = big[: nxo * nyo * nzi * c].reshape(nxo, nyo, nzi * c)
            u1 = u.reshape(1, nxi, nyi * nzi * c)
            _axis_apply(ax.indptr, ax.indices, ax.data, u1, u1, False, t1, False)
            t1 = t1.reshape(nxo, nyi, nzi * c)
            _axis_apply(ay.indptr, ay.indices, ay.data, t1, t1, False, t2, False)
            t2 = t2.reshape(nxo * nyo, nzi, c)
            _axis_apply(
                az.indptr, az.indices, az.data, t2, t2, False, out.reshape(nxo * nyo, nzo, c), add
            )
    return out


def coarse_stencil(
    moduli, fine_shape, starts, codes, n_codes, table, extra_of, extra, slot_of, out
):
    with _LOCK:
        _coarse_stencil(
            moduli,
            *fine_shape,
            *starts,
            *codes,
            n_codes[1],
            n_codes[2],
            table,
            extra_of,
            extra,
            slot_of,
            out,
        )
    return out
