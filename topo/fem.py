"""Finite-element model on the structured grid: supports, loads, passive sets,
and the analysis of a design through a linear system (linear.py), which assembles
K = Σ_e E_e k0 and solves. Modified SIMP (Sigmund 2007, Struct. Multidisc. Optim.
33:401) gives E(ρ) = E0·(e_min + ρ^p (1 − e_min)).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import kernels
from .elements import centre_strain_displacement, elasticity_matrix, element_stiffness, von_mises
from .grid import Grid
from .loads import LoadError, rigid_distribution
from .problem import Mesh, Problem, ProblemError
from .regions import mesh_fault, outside_domain, select_elements, select_mask, select_nodes
from .solvers import make_system
from .timing import Timer

AXIS_INDEX = {"x": 0, "y": 1, "z": 2}


@dataclass(frozen=True)
class Selection:
    """What one region of the problem selected, for reports."""

    key: str  # key path in the problem file, e.g. support[0]
    role: str  # support | force | solid | void
    name: str
    nodes: int
    elements: int


@dataclass
class Analysis:
    """Displacements and derived quantities of one design, every load case."""

    displacements: np.ndarray  # (n_dofs, n_cases) mm
    compliances: np.ndarray  # (n_cases,) N·mm, fᵀu
    energies: np.ndarray  # (n_elements, n_cases) u_eᵀ k0 u_e with the solid modulus
    max_displacement: np.ndarray  # (n_cases,) mm, largest nodal displacement magnitude
    von_mises: np.ndarray  # (n_elements, n_cases) MPa, solid-material stress at centres


class Model:
    """Grid, element matrix, supports, loads and passive sets of a problem."""

    def __init__(self, problem: Problem, system_factory=None):
        """`system_factory(grid, ke, fixed_mask)` replaces the linear system
        `optimization.solver` names (tests and benchmarks use it to set options)."""
        self.problem = problem
        dom, mat = problem.domain, problem.material
        self.grid = grid = Grid(dom.shape, dom.element_size)
        self.dim = dim = grid.dim
        thickness = dom.thickness if dim == 2 else 1.0
        self.ke = element_stiffness(
            dim, dom.element_size, mat.poissons_ratio, mat.youngs_modulus, thickness
        )
        self.selections: list[Selection] = []
        self.support_nodes: list[np.ndarray] = []  # per [[support]], in file order
        self.load_nodes: list[tuple[str, np.ndarray]] = []  # (case/force name, nodes) per force
        self._fixed = self._supports()
        self.solid, self.void = self._passives()
        self.loads = self._loads()
        self._check_restraint()
        self.probes = self._probes()
        self.free = np.flatnonzero(~self._fixed)
        factory = system_factory or (
            lambda g, ke, fixed: make_system(problem.optimization.solver, g, ke, fixed)
        )
        self.system = factory(grid, self.ke, self._fixed)

    # ------------------------------------------------------------------ problem → sets
    def _nodes(self, region, key: str, role: str, name: str) -> np.ndarray:
        src = self.problem.source
        self._check_mesh(region, key)
        if outside_domain(region, self.grid):
            raise ProblemError(
                src,
                f"{key}.region",
                f"the region lies outside the domain (0..{list(self.grid.size)} mm)",
            )
        nodes = select_nodes(region, self.grid)
        if len(nodes) == 0:
            raise ProblemError(
                src,
                f"{key}.region",
                f"the region selects no nodes; nodes lie every {self.grid.h} mm",
            )
        self.selections.append(Selection(key, role, name, len(nodes), 0))
        return nodes

    def _outside_envelope(self) -> np.ndarray:
        """Elements whose centres lie outside `domain.envelope` (none without one)."""
        path = self.problem.domain.envelope
        if path is None:
            return np.zeros(self.grid.n_elements, dtype=bool)
        envelope = Mesh(path)
        src = self.problem.source
        fault = mesh_fault(envelope, self.grid)
        if fault:
            raise ProblemError(src, "domain.envelope", fault)
        outside = ~select_mask(envelope, self.grid)
        if outside.all():
            raise ProblemError(src, "domain.envelope", "no element centre lies inside the envelope")
        if outside.any():
            name = "outside the envelope"
            self.selections.append(
                Selection("domain.envelope", "void", name, 0, int(outside.sum()))
            )
        return outside

    def _check_mesh(self, region, key: str) -> None:
        fault = mesh_fault(region, self.grid)
        if fault:
            raise ProblemError(self.problem.source, f"{key}.region.mesh", fault)

    def _supports(self) -> np.ndarray:
        fixed = np.zeros(self.grid.n_dofs, dtype=bool)
        for i, s in enumerate(self.problem.supports):
            nodes = self._nodes(s.region, f"support[{i}]", "support", s.name)
            self.support_nodes.append(nodes)
            for axis in s.fix:
                fixed[self.dim * nodes + AXIS_INDEX[axis]] = True
        return fixed

    def _check_restraint(self) -> None:
        from .rigid import free_motions

        free = free_motions(self.grid.node_coords, np.flatnonzero(self._fixed))
        if free:
            raise ProblemError(
                self.problem.source,
                "support",
                "the supports leave the part free to "
                f"move: {'; '.join(free)}. Fix more directions or add a support",
            )

    def _probes(self) -> list:
        """The problem's [[deflection]] points as probes (deflection.py)."""
        from .deflection import Probe, unit_direction

        names = [c.name for c in self.problem.load_cases]
        out = []
        for i, d in enumerate(self.problem.deflections):
            nodes = self._nodes(d.region, f"deflection[{i}]", "deflection", d.name)
            cases = tuple(range(len(names))) if d.load_case is None else (names.index(d.load_case),)
            out.append(Probe(d.name, nodes, unit_direction(d.direction, self.dim), cases, d.limit))
        return out

    def _void_nodes(self) -> np.ndarray:
        """Nodes every one of whose elements is in a void region: no material there."""
        void_nodes = np.ones(self.grid.n_nodes, dtype=bool)
        np.logical_and.at(
            void_nodes,
            self.grid.element_nodes.ravel(),
            np.repeat(self.void, self.grid.element_nodes.shape[1]),
        )
        return void_nodes

    def _check_supports_in_void(self, void_nodes: np.ndarray) -> None:
        for i, nodes in enumerate(self.support_nodes):
            if void_nodes[nodes].all():
                raise ProblemError(
                    self.problem.source,
                    f"support[{i}].region",
                    "the support lies inside a void (keep-out) region: no material can rest on it",
                )

    def _loads(self) -> np.ndarray:
        f = np.zeros((self.grid.n_dofs, len(self.problem.load_cases)))
        void_nodes = self._void_nodes()
        self._check_supports_in_void(void_nodes)
        for c, case in enumerate(self.problem.load_cases):
            for j, force in enumerate(case.forces):
                key = f"load_case[{c}].force[{j}]"
                nodes = self._nodes(force.region, key, "force", case.name)
                self.load_nodes.append((case.name if j == 0 else f"{case.name}[{j}]", nodes))
                if void_nodes[nodes].all():
                    raise ProblemError(
                        self.problem.source,
                        f"{key}.region",
                        "the load lies inside a void (keep-out) region: no material carries it",
                    )
                try:
                    nodal = rigid_distribution(
                        self.grid.node_coords[nodes], force.total, force.moment, force.at
                    )
                except LoadError as exc:
                    what = "moment" if force.moment is not None else "at"
                    raise ProblemError(self.problem.source, f"{key}.{what}", str(exc)) from None
                for axis in range(self.dim):
                    np.add.at(f[:, c], self.dim * nodes + axis, nodal[:, axis])
        return f

    def _passives(self) -> tuple[np.ndarray, np.ndarray]:
        n = self.grid.n_elements
        masks = {"solid": np.zeros(n, dtype=bool), "void": np.zeros(n, dtype=bool)}
        self.passive_elements: list[np.ndarray] = []  # per [[passive]], in file order
        src = self.problem.source
        outside = self._outside_envelope()
        masks["void"] |= outside
        for i, p in enumerate(self.problem.passives):
            key = f"passive[{i}]"
            self._check_mesh(p.region, key)
            if outside_domain(p.region, self.grid):
                raise ProblemError(src, f"{key}.region", "the region lies outside the domain")
            elems = select_elements(p.region, self.grid)
            if len(elems) == 0:
                raise ProblemError(
                    src,
                    f"{key}.region",
                    "the region selects no elements (elements are selected by their centre)",
                )
            if p.kind == "solid" and outside[elems].any():
                raise ProblemError(
                    src,
                    f"{key}.region",
                    f"{int(outside[elems].sum())} of its elements lie outside the envelope "
                    "(domain.envelope), which must hold every interface",
                )
            masks[p.kind][elems] = True
            self.passive_elements.append(elems)
            self.selections.append(Selection(key, p.kind, p.name, 0, len(elems)))
        both = masks["solid"] & masks["void"]
        if both.any():
            raise ProblemError(
                src, "passive", f"solid and void regions overlap in {both.sum()} elements"
            )
        return masks["solid"], masks["void"]

    @property
    def fixed_dofs(self) -> np.ndarray:
        return np.flatnonzero(self._fixed)

    @property
    def active(self) -> np.ndarray:
        """Elements the optimiser may change (not in a passive region)."""
        return ~(self.solid | self.void)

    # ------------------------------------------------------------------- analysis
    def moduli(self, density: np.ndarray) -> np.ndarray:
        opt = self.problem.optimization
        e_min = opt.min_stiffness
        return e_min + density**opt.penalty * (1.0 - e_min)

    def moduli_derivative(self, density: np.ndarray) -> np.ndarray:
        opt = self.problem.optimization
        p = opt.penalty
        return p * density ** (p - 1) * (1.0 - opt.min_stiffness)

    def analyze(
        self, density: np.ndarray, stresses: bool = True, timer: Timer | None = None
    ) -> Analysis:
        """Solve every load case for the element densities (flat, C order).
        `stresses=False` skips the von Mises field (not needed inside the loop);
        `timer` accumulates seconds under 'assembly', 'solve' and 'sensitivities'."""
        timer = timer or Timer()
        with timer("assembly"):
            moduli = self.moduli(density)
        self.system.assemble(moduli, timer)
        with timer("solve"):
            u = self.system.solve(self.loads)
            if not np.all(np.isfinite(u)):
                raise FloatingPointError("the linear solve returned non-finite displacements")
        with timer("sensitivities"):
            compliances = np.einsum("dc,dc->c", self.loads, u)
            mag = np.linalg.norm(u.reshape(self.grid.n_nodes, self.dim, -1), axis=1)
            if self.dim == 3:
                # compiled loops over the elements: no (elements × 24) copies of u
                u2 = np.ascontiguousarray(u)
                energies = kernels.element_energies(
                    u2, self.ke, self.grid.shape, np.empty((self.grid.n_elements, u.shape[1]))
                )
                vm = self._von_mises_3d(u2) if stresses else np.zeros_like(energies)
                return Analysis(u, compliances, energies, mag.max(axis=0), vm)
            ue = u[self.grid.element_dofs]  # (ne, nde, nc)
            # u_eᵀ k0 u_e for every element and case: one matrix product over all elements
            flat = ue.transpose(0, 2, 1).reshape(-1, ue.shape[1])
            energies = np.einsum("ij,ij->i", flat @ self.ke, flat).reshape(len(ue), -1)
            vm = self._von_mises(ue) if stresses else np.zeros_like(energies)
        return Analysis(u, compliances, energies, mag.max(axis=0), vm)

    def resolve(self, rhs: np.ndarray) -> np.ndarray:
        """K⁻¹ rhs with the matrix of the last analysis (adjoint solves); full-size
        vectors, zero on the fixed dofs."""
        return self.system.solve(rhs)

    def _von_mises_3d(self, u: np.ndarray) -> np.ndarray:
        mat = self.problem.material
        b = centre_strain_displacement(3, self.grid.h)
        db = np.ascontiguousarray(elasticity_matrix(3, mat.youngs_modulus, mat.poissons_ratio) @ b)
        stress = kernels.element_values(
            u, db, self.grid.shape, np.empty((self.grid.n_elements, 6, u.shape[1]))
        )
        return von_mises(stress.transpose(0, 2, 1))

    def _von_mises(self, ue: np.ndarray) -> np.ndarray:
        mat = self.problem.material
        b = centre_strain_displacement(self.dim, self.grid.h)
        d = elasticity_matrix(self.dim, mat.youngs_modulus, mat.poissons_ratio)
        stress = np.einsum("sn,enc->ecs", d @ b, ue, optimize=True)
        return von_mises(stress)
