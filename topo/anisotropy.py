"""Strength of the printed material by the direction of the stress relative to the
build direction.

Printed alloys are close to transversely isotropic about the build direction: one
strength for loading along it (across the layers, "parallel") and one within the
layers ("perpendicular"). The direction that decides is that of the principal stress
of largest magnitude; θ is its angle to the build direction (0° to 90°, the sense of
either vector does not matter).

Interpolation: the off-axis uniaxial strength of the Tsai-Hill criterion (R. Hill,
"A theory of the yielding and plastic flow of anisotropic metals", Proc. R. Soc.
Lond. A 193, 1948; V. D. Azzi and S. W. Tsai, Exp. Mech. 5, 1965, both recalled from
memory) is 1/S(θ)² = c⁴/X² + (1/S₁₂² − 1/X²) c² s² + s⁴/Y² with c = cos θ, s = sin θ.
Printed-alloy data give no shear strength across the layers; taking
1/S₁₂² = 2/X² + 1/Y² (which is von Mises' S₁₂ = X/√3 when X = Y) reduces it to

    1/S(θ)² = cos²θ / X² + sin²θ / Y²,   X parallel, Y perpendicular,

which moves monotonically between the two measured strengths.

Stresses are Voigt rows: 2D [σx, σy, τxy], 3D [σx, σy, σz, τyz, τxz, τxy].
"""

from __future__ import annotations

import numpy as np

CRITERION = (
    "strength by the angle θ between the largest-magnitude principal stress and the build "
    "direction: 1/S(θ)² = cos²θ/S∥² + sin²θ/S⊥² (S∥ loading along the build direction, "
    "across the layers; S⊥ within them), the Tsai-Hill off-axis strength (Hill 1948; Azzi & "
    "Tsai 1965) with the shear term von Mises gives an isotropic solid"
)
NO_BUILD = "no build direction given: the weaker of the two orientations is used everywhere"


def build_vector(direction: str | None, dim: int) -> np.ndarray | None:
    """The unit vector of a build direction such as "+z" (None: no direction)."""
    if direction is None:
        return None
    vec = np.zeros(dim)
    vec["xyz".index(direction[1])] = -1.0 if direction[0] == "-" else 1.0
    return vec


def tensors(stress: np.ndarray) -> np.ndarray:
    """Voigt rows (…, 3 or 6) → symmetric tensors (…, 2, 2) or (…, 3, 3)."""
    s = np.asarray(stress, dtype=float)
    if s.shape[-1] == 3:
        rows = [[s[..., 0], s[..., 2]], [s[..., 2], s[..., 1]]]
    else:
        rows = [
            [s[..., 0], s[..., 5], s[..., 4]],
            [s[..., 5], s[..., 1], s[..., 3]],
            [s[..., 4], s[..., 3], s[..., 2]],
        ]
    return np.stack([np.stack(r, axis=-1) for r in rows], axis=-2)


def principal_direction(stress: np.ndarray) -> np.ndarray:
    """Unit direction (…, dim) of the principal stress of largest magnitude.

    >>> principal_direction(np.array([0.0, -5.0, 0.0])).round(6).tolist()
    [0.0, 1.0]
    """
    values, vectors = np.linalg.eigh(tensors(stress))
    k = np.argmax(np.abs(values), axis=-1)
    return np.take_along_axis(vectors, k[..., None, None], axis=-1)[..., 0]


def angle_to_build(stress: np.ndarray, build: np.ndarray) -> np.ndarray:
    """θ in degrees, 0 (along the build direction) to 90 (within the layers)."""
    cos = np.abs(principal_direction(stress) @ build)
    return np.degrees(np.arccos(np.clip(cos, 0.0, 1.0)))


def directional_strength(parallel: float, perpendicular: float, angle_deg):
    """S(θ) of the module's interpolation; equal to `parallel` at 0°, `perpendicular`
    at 90°."""
    theta = np.radians(np.asarray(angle_deg, dtype=float))
    return (np.cos(theta) ** 2 / parallel**2 + np.sin(theta) ** 2 / perpendicular**2) ** -0.5


def strength_at(parallel, perpendicular, angles) -> np.ndarray | float | None:
    """The strength at each angle, or, without angles (no build direction) or with one
    orientation unknown, the weaker known value."""
    known = [v for v in (parallel, perpendicular) if v]
    if not known:
        return None
    if angles is None or len(known) < 2:
        return min(known)
    return directional_strength(parallel, perpendicular, angles)


def yield_basis(material, build: str | None) -> str:
    """Which yield strength the static safety factor uses, in words."""
    if material.yield_parallel is None or material.yield_perpendicular is None:
        return "material.yield_strength, the same in every direction"
    named = (
        f"the {material.condition} condition's yield ({material.yield_parallel:g} MPa along "
        f"the build direction, {material.yield_perpendicular:g} MPa within the layers)"
    )
    if build is None:
        return f"{named}, the weaker one: {NO_BUILD}"
    return (
        f"{named} at the angle θ of the largest principal stress to the build direction, "
        "1/S² = cos²θ/S∥² + sin²θ/S⊥² (Tsai-Hill off-axis strength)"
    )


def yield_safety(material, build: str | None, stress: np.ndarray, von_mises: np.ndarray):
    """Per load case: the least yield strength over von Mises stress among the points,
    with the yield strength and the principal stress's angle to the build direction
    (None when not resolved) there. `stress` (n, n_cases, ns), `von_mises` (n, n_cases);
    no points or no yield strength: None for all three."""
    par, perp = material.yield_parallel, material.yield_perpendicular
    oriented = par is not None and perp is not None
    axis = build_vector(build, 2 if stress.shape[-1] == 3 else 3) if oriented else None
    rows = []
    for c in range(von_mises.shape[1]):
        vm = von_mises[:, c]
        angles = angle_to_build(stress[:, c], axis) if axis is not None and len(vm) else None
        fy = strength_at(par, perp, angles) if oriented else material.yield_strength
        if fy is None or not len(vm) or not np.any(vm > 0):
            rows.append((None, fy if np.isscalar(fy) else None, None))
            continue
        fy = np.broadcast_to(np.asarray(fy, float), vm.shape)
        with np.errstate(divide="ignore"):
            ratio = np.where(vm > 0, fy / np.where(vm > 0, vm, 1.0), np.inf)
        j = int(np.argmin(ratio))
        rows.append((float(ratio[j]), float(fy[j]), None if angles is None else float(angles[j])))
    return rows
