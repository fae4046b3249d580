"""Bilinear Q4 (plane stress) and trilinear H8 elements on a square/cubic cell.

The stiffness is integrated with 2×2 (×2) Gauss points, which is exact for these
elements on an undistorted cell (Zienkiewicz & Taylor, The Finite Element Method,
Vol. 1, ch. 6). Strains use engineering shear in Voigt order:
2D [εx, εy, γxy]; 3D [εx, εy, εz, γyz, γxz, γxy].
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

from .grid import H8_CORNERS, Q4_CORNERS

GAUSS_2 = np.array([-1.0, 1.0]) / np.sqrt(3.0)


def corners(dim: int) -> np.ndarray:
    return Q4_CORNERS if dim == 2 else H8_CORNERS


def elasticity_matrix(dim: int, youngs_modulus: float, poissons_ratio: float) -> np.ndarray:
    """Plane-stress (2D) or isotropic 3D elasticity matrix D with σ = D ε."""
    e, nu = youngs_modulus, poissons_ratio
    if dim == 2:
        return e / (1 - nu**2) * np.array([[1, nu, 0], [nu, 1, 0], [0, 0, (1 - nu) / 2]])
    lam = e * nu / ((1 + nu) * (1 - 2 * nu))
    mu = e / (2 * (1 + nu))
    d = np.zeros((6, 6))
    d[:3, :3] = lam
    d[np.arange(3), np.arange(3)] += 2 * mu
    d[np.arange(3, 6), np.arange(3, 6)] = mu
    return d


def strain_displacement(dim: int, h: float, xi: np.ndarray) -> np.ndarray:
    """B matrix at the natural point xi ∈ [-1, 1]^dim of a cell of size h."""
    signs = 2.0 * corners(dim) - 1.0  # (nn, dim): corner coordinates in ±1
    # dN_a/dξ_k = s_ak/2^dim · Π_{m≠k} (1 + s_am ξ_m); dξ/dx = 2/h
    factors = 1.0 + signs * np.asarray(xi)[None, :]
    grads = np.empty_like(signs)
    for k in range(dim):
        others = np.prod(np.delete(factors, k, axis=1), axis=1)
        grads[:, k] = signs[:, k] * others / 2**dim * (2.0 / h)
    nn = len(signs)
    b = np.zeros((3 if dim == 2 else 6, dim * nn))
    gx = grads[:, 0]
    gy = grads[:, 1]
    if dim == 2:
        b[0, 0::2] = gx
        b[1, 1::2] = gy
        b[2, 0::2] = gy
        b[2, 1::2] = gx
        return b
    gz = grads[:, 2]
    b[0, 0::3] = gx
    b[1, 1::3] = gy
    b[2, 2::3] = gz
    b[3, 1::3] = gz
    b[3, 2::3] = gy
    b[4, 0::3] = gz
    b[4, 2::3] = gx
    b[5, 0::3] = gy
    b[5, 1::3] = gx
    return b


def gauss_points(dim: int) -> np.ndarray:
    mesh = np.meshgrid(*([GAUSS_2] * dim), indexing="ij")
    return np.stack([m.ravel() for m in mesh], axis=1)


@lru_cache(maxsize=16)
def _stiffness(dim: int, h: float, poissons_ratio: float, thickness: float) -> np.ndarray:
    d = elasticity_matrix(dim, 1.0, poissons_ratio)
    jac_det = (h / 2.0) ** dim  # Gauss weights are all 1
    k = sum(b.T @ d @ b for b in (strain_displacement(dim, h, p) for p in gauss_points(dim)))
    k = k * jac_det * (thickness if dim == 2 else 1.0)
    k = 0.5 * (k + k.T)
    k.setflags(write=False)
    return k


def element_stiffness(
    dim: int, h: float, poissons_ratio: float, youngs_modulus: float = 1.0, thickness: float = 1.0
) -> np.ndarray:
    """Element stiffness matrix (8×8 Q4 with thickness, or 24×24 H8), N/mm."""
    return youngs_modulus * _stiffness(dim, float(h), float(poissons_ratio), float(thickness))


def centre_strain_displacement(dim: int, h: float) -> np.ndarray:
    """B at the element centre: the strain that von Mises estimates are based on."""
    return strain_displacement(dim, h, np.zeros(dim))


def von_mises(stress: np.ndarray) -> np.ndarray:
    """von Mises equivalent stress of Voigt stress rows (…, 3) plane stress or (…, 6)."""
    s = np.asarray(stress)
    if s.shape[-1] == 3:
        sx, sy, txy = s[..., 0], s[..., 1], s[..., 2]
        return np.sqrt(np.maximum(sx**2 - sx * sy + sy**2 + 3 * txy**2, 0.0))
    sx, sy, sz, tyz, txz, txy = (s[..., i] for i in range(6))
    return np.sqrt(
        np.maximum(
            0.5 * ((sx - sy) ** 2 + (sy - sz) ** 2 + (sz - sx) ** 2)
            + 3 * (tyz**2 + txz**2 + txy**2),
            0.0,
        )
    )
