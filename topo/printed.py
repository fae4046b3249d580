"""The part that gets printed, and the figures an engineer signs off for it.

The optimiser works on a grey density field; the machine prints a solid/void
part. The printed design is every element at ρ ≥ 0.5 (the level of design.stl)
plus every passive solid region whole (bolt bosses, load eyes and mounting faces
are always made, whether or not the overhang layer let the optimiser keep them),
minus the void (keep-out) regions. It is re-analysed for every load case, and its
figures are the headline ones; the optimiser's figures of the grey field stand
beside them with the relative gap, so that a design whose grey figures flatter
the part is seen at once.

A printed part in which some load region reaches no support, or has loaded nodes
on no printed element (integrity.load_path), does not carry that load: only the
void's E_min would hold it. Any stiffness, deflection, stress or fatigue figure
would then describe E_min and not the part, and its solve is the hardest of a run
(1,395 CG iterations against the design loop's 6–8, measured on 60×30×30 after 3
design iterations). Such a part is not analysed: its analysis is None, and every
check that needs one fails saying why.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from .integrity import LoadPath, load_path
from .printability import SOLID

# Pieces smaller than this share of the largest piece are floating debris, dropped
# from the printed part as from the design mesh (mesh.remove_debris).
DEBRIS_FRACTION = 0.01


def printed_density(density: np.ndarray, model) -> np.ndarray:
    """0/1 field of the printed part, grid shape: ρ ≥ 0.5, passive solids whole,
    void regions empty, floating debris dropped: pieces under DEBRIS_FRACTION of
    the largest that hold no passive solid, where elements touching at an edge or a
    corner count as one piece (so an element that rests diagonally on the part and
    supports the layer above it stays; the load-path check is stricter)."""
    shape = np.shape(density)
    flat = np.asarray(density, dtype=float).ravel()
    solid = ((flat >= SOLID) | model.solid) & ~model.void
    touching = ndimage.generate_binary_structure(len(shape), len(shape))
    labels, n = ndimage.label(solid.reshape(shape), structure=touching)
    if n > 1:
        labels = labels.ravel()
        sizes = np.bincount(labels)[1:]
        keep = (sizes >= DEBRIS_FRACTION * sizes.max()) | (
            np.bincount(labels, weights=model.solid, minlength=n + 1)[1:] > 0
        )
        solid &= np.concatenate([[False], keep])[labels]
    return solid.astype(float).reshape(shape)


@dataclass
class PrintedPart:
    """The printed design, its analysis, and how it differs from the optimiser's."""

    density: np.ndarray  # 0/1, grid shape
    analysis: object | None  # fem.Analysis of the printed design; None: not analysed
    passive_added: int  # passive-solid elements the optimiser's design had below ρ = 0.5
    added: int  # elements printed that the optimiser had below 0.5 (all passive)
    removed: int  # elements at ρ ≥ 0.5 in the optimiser's design that are not printed
    load_path: LoadPath | None = None

    def why_not_analysed(self) -> str:
        """Why `analysis` is None (module docstring), as a sentence for the checks."""
        path = self.load_path
        parts = []
        if path and path.cut_off:
            parts.append(f"load region(s) {', '.join(path.cut_off)} reach no support")
        if path and path.unattached:
            parts.append(
                f"load region(s) {', '.join(path.unattached)} have loaded nodes on no "
                "printed element"
            )
        return (
            f"not analysed: {'; '.join(parts)}; the printed part does not carry that load "
            "into a support, only the void's E_min would"
        )


def printed_part(model, density: np.ndarray) -> PrintedPart:
    """Form and re-analyse the printed design of a grey density field."""
    printed = printed_density(density, model)
    grey = np.asarray(density, dtype=float).ravel() >= SOLID
    made = printed.ravel() > 0.5
    path = load_path(
        printed,
        model.grid,
        model.support_nodes,
        model.load_nodes,
        model.problem.domain.element_volume,
    )
    analysis = None if path.mechanism else model.analyze(printed.ravel())
    return PrintedPart(
        printed,
        analysis,
        int((model.solid & ~grey).sum()),
        int((made & ~grey).sum()),
        int((grey & ~made).sum()),
        path,
    )


def finite_or_none(value) -> float | None:
    """A float for JSON, None when it is not finite (strict JSON has no NaN)."""
    if value is None:
        return None
    value = float(value)
    return value if np.isfinite(value) else None


def relative_gap(printed: float | None, grey: float | None) -> float | None:
    """(printed − grey) / |grey|: positive when the printed part is worse."""
    if printed is None or grey is None or grey == 0:
        return None
    return finite_or_none((printed - grey) / abs(grey))
