"""Wire structures: 3-D polylines with cross-sections, ports, loads, junctions and segmentation.

Everything is in metres. A :class:`Structure` is a list of :class:`Wire` polylines, the
:class:`Port` points where a delta gap (or a gap of finite width) drives the structure, and the
lumped :class:`Load` points. :meth:`Structure.mesh` validates it and cuts it into straight
segments, returning a :class:`Mesh` with the triangle (rooftop) basis functions of the
Galerkin solver in :mod:`sweeps.mom`.

Basis functions
---------------
One triangle basis sits on every node shared by two segments; at a junction of ``k`` segments
there are ``k - 1`` of them, each carrying current from the first segment into one of the others,
which enforces Kirchhoff's current law (current continuity) at the junction. Free wire ends carry
no basis, so the current vanishes there. Each basis is described by its two *halves*: the
segment, which linear shape of that segment it uses (``0``: ``1 - u``, ``1``: ``u`` in the
segment's own coordinate ``u`` from its start to its end node), the sign of the current relative
to the segment direction, and the divergence (``+1/length`` on the half flowing toward the node,
``-1/length`` on the half flowing away).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from functools import cached_property
from typing import Literal, get_args

import numpy as np
from numpy.typing import ArrayLike, NDArray

from sweeps import materials
from sweeps.errors import GeometryError

__all__ = [
    "SectionKind",
    "CrossSection",
    "Wire",
    "Port",
    "Load",
    "Structure",
    "Mesh",
    "MeshRules",
]

SectionKind = Literal["round", "rect"]


def rownorm(x: NDArray[np.float64]) -> NDArray[np.float64]:
    """Euclidean norm over the last axis; the numbers of ``np.linalg.norm(x, axis=-1)`` for real
    ``x``, without its Python-level argument handling (it is called on small arrays a lot)."""
    return np.sqrt(np.add.reduce(x * x, axis=-1))


@dataclass(frozen=True)
class CrossSection:
    """Cross-section of a conductor: a round wire or a flat printed trace.

    Parameters
    ----------
    kind : {"round", "rect"}
        Shape of the section.
    radius_m : float
        Radius of a round wire in m (``kind="round"``).
    width_m, thickness_m : float
        Width and thickness of a printed trace in m (``kind="rect"``); the trace lies flat, its
        width in the plane of the structure.
    """

    kind: SectionKind
    radius_m: float = 0.0
    width_m: float = 0.0
    thickness_m: float = 0.0

    def __post_init__(self) -> None:
        if self.kind not in get_args(SectionKind):
            raise GeometryError(f"cross-section kind must be one of {get_args(SectionKind)}")
        if self.kind == "round":
            if not (self.radius_m > 0 and math.isfinite(self.radius_m)):
                raise GeometryError(f"wire radius must be positive (got {self.radius_m!r} m)")
        else:
            if not (self.width_m > 0 and math.isfinite(self.width_m)):
                raise GeometryError(f"trace width must be positive (got {self.width_m!r} m)")
            if not (self.thickness_m > 0 and math.isfinite(self.thickness_m)):
                raise GeometryError(
                    f"trace thickness must be positive (got {self.thickness_m!r} m)"
                )

    @classmethod
    def round_wire(cls, radius_m: float) -> CrossSection:
        """A round wire of radius ``radius_m`` (m)."""
        return cls("round", radius_m=radius_m)

    @classmethod
    def trace(cls, width_m: float, thickness_m: float) -> CrossSection:
        """A flat rectangular printed trace ``width_m`` x ``thickness_m`` (m)."""
        return cls("rect", width_m=width_m, thickness_m=thickness_m)

    @property
    def equivalent_radius_m(self) -> float:
        """Electrostatic equivalent radius for the thin-wire kernel, in m."""
        if self.kind == "round":
            return self.radius_m
        return materials.rect_equivalent_radius(self.width_m, self.thickness_m)

    @property
    def half_extent_m(self) -> float:
        """Largest distance from the axis to the surface, in m (for clearance checks)."""
        if self.kind == "round":
            return self.radius_m
        return 0.5 * math.hypot(self.width_m, self.thickness_m)

    def internal_impedance(self, f_hz: ArrayLike, conductivity: float) -> NDArray[np.complex128]:
        """Internal (surface) impedance per unit length in ohm/m; see :mod:`sweeps.materials`."""
        if self.kind == "round":
            return np.asarray(
                materials.round_wire_impedance(np.asarray(f_hz, float), self.radius_m,
                                               conductivity)
            )
        return materials.rect_trace_impedance(
            np.asarray(f_hz, float), self.width_m, self.thickness_m, conductivity
        )


@dataclass(frozen=True)
class Wire:
    """A conductor along a 3-D polyline.

    Parameters
    ----------
    points : array_like, shape (n, 3)
        Vertices in m, ``n >= 2``.
    section : CrossSection
        Conductor cross-section, constant along the wire.
    conductivity_s_per_m : float
        Conductivity in S/m; ``math.inf`` for a perfect conductor.
    segments : int, optional
        Number of segments for the whole wire (spread over its straight pieces in proportion to
        their lengths); by default :class:`MeshRules` chooses it.
    name : str
        Label used in error messages.
    """

    points: NDArray[np.float64]
    section: CrossSection
    conductivity_s_per_m: float = math.inf
    segments: int | None = None
    name: str = ""

    def __post_init__(self) -> None:
        pts = np.asarray(self.points, dtype=float)
        if pts.ndim != 2 or pts.shape[1] != 3 or pts.shape[0] < 2:
            raise GeometryError(
                f"wire {self.label}: points must be an (n, 3) array with n >= 2 "
                f"(got shape {pts.shape})"
            )
        if not np.all(np.isfinite(pts)):
            raise GeometryError(f"wire {self.label}: points must be finite")
        object.__setattr__(self, "points", pts)
        if not (self.conductivity_s_per_m > 0):
            raise GeometryError(
                f"wire {self.label}: conductivity must be > 0 S/m or inf for PEC "
                f"(got {self.conductivity_s_per_m!r})"
            )
        if self.segments is not None and int(self.segments) < 1:
            raise GeometryError(f"wire {self.label}: segments must be >= 1 (got {self.segments})")

    @property
    def label(self) -> str:
        return repr(self.name) if self.name else "(unnamed)"

    @property
    def length_m(self) -> float:
        """Total length along the polyline in m."""
        return float(np.sum(rownorm(np.diff(self.points, axis=0))))


@dataclass(frozen=True)
class Port:
    """A voltage source across a gap in a wire.

    Parameters
    ----------
    position : array_like, shape (3,)
        A point on a wire, in m; the mesh puts a node there.
    gap_m : float
        Width of the feed gap in m; 0 is a delta gap. A finite gap spreads the impressed field
        ``V/g`` uniformly over ``g`` centred on the node.
    name : str
        Label for the port.
    """

    position: NDArray[np.float64]
    gap_m: float = 0.0
    name: str = ""

    def __post_init__(self) -> None:
        object.__setattr__(self, "position", np.asarray(self.position, dtype=float).reshape(3))
        if not (self.gap_m >= 0 and math.isfinite(self.gap_m)):
            raise GeometryError(f"port {self.name!r}: gap must be >= 0 m (got {self.gap_m!r})")


@dataclass(frozen=True)
class Load:
    """A lumped series R-L-C load across a delta gap at a point of a wire.

    ``Z(f) = R + j omega L + 1/(j omega C)``; ``c_f = inf`` means no capacitor.
    """

    position: NDArray[np.float64]
    r_ohm: float = 0.0
    l_h: float = 0.0
    c_f: float = math.inf
    name: str = ""

    def __post_init__(self) -> None:
        object.__setattr__(self, "position", np.asarray(self.position, dtype=float).reshape(3))
        if self.r_ohm < 0 or self.l_h < 0 or not self.c_f > 0:
            raise GeometryError(
                f"load {self.name!r}: need r_ohm >= 0, l_h >= 0 and c_f > 0 "
                f"(got {self.r_ohm}, {self.l_h}, {self.c_f})"
            )

    def impedance(self, f_hz: ArrayLike) -> NDArray[np.complex128]:
        """Series impedance in ohm at ``f_hz``."""
        w = 2.0 * np.pi * np.asarray(f_hz, dtype=float)
        z = self.r_ohm + 1j * w * self.l_h + 0j * w
        if math.isfinite(self.c_f):
            z = z + 1.0 / (1j * w * self.c_f)
        return z


@dataclass(frozen=True)
class MeshRules:
    """Segmentation and validity rules.

    Parameters
    ----------
    segments_per_wavelength : float
        Default segment density at the highest frequency of the sweep. The default of 50 keeps the
        resonance of the shapes of :mod:`sweeps.shapes` converged within 0.2 %
        (``tests/sweeps/test_convergence.py``).
    min_segments_per_piece : int
        Every straight piece of a wire gets at least this many segments.
    end_caps : bool
        Close every free wire end with a flat disk that can hold charge (the end face of the
        printed trace or wire). Without it the current is forced to zero on an open tube edge,
        whose edge singularity makes resonance converge slowly under refinement.
    max_ka : float
        Thin-wire limit on ``k a`` at the highest frequency (equivalent radius ``a``). Above
        about 0.1 the axial-current, thin-wire model is no longer trustworthy (common practice).
    min_length_over_radius : dict
        Shortest allowed segment, in equivalent radii, for each kernel: the reduced kernel needs
        segments of at least about two radii (common practice); the exact kernel stays accurate
        far below that, and the limit only keeps bends from folding the tube onto itself.
    """

    segments_per_wavelength: float = 50.0
    min_segments_per_piece: int = 2
    end_caps: bool = True
    max_ka: float = 0.1
    min_length_over_radius: dict[str, float] = field(
        default_factory=lambda: {"exact": 0.25, "reduced": 2.0}
    )


@dataclass
class Mesh:
    """A segmented, validated structure ready for the solver (all arrays SI).

    Attributes
    ----------
    nodes : ndarray, shape (n_nodes, 3)
    seg_nodes : ndarray of int, shape (S, 2)
        Start and end node of each segment.
    seg_radius : ndarray, shape (S,)
        Equivalent (kernel) radius of each segment in m.
    seg_wire : ndarray of int, shape (S,)
        Index of the wire each segment belongs to.
    seg_piece : ndarray of int, shape (S,)
        Index of the straight piece (global numbering) each segment belongs to; segments of one
        piece are collinear.
    half_seg, half_shape, half_sign : ndarray of int, shape (N, 2)
        For basis ``m``, its two halves: segment, shape (0 or 1) and current sign.
    half_div : ndarray, shape (N, 2)
        Divergence of each half in 1/m; for an end-cap half, the charge weight -1.
    half_cap : ndarray of int, shape (N, 2)
        End-cap index of a half that is an end cap, else -1. An end-cap half carries the current
        of a free wire end onto a flat disk of the wire's equivalent radius (no axial current,
        charge only).
    cap_nodes : ndarray of int, shape (C,)
    cap_radius : ndarray, shape (C,)
    basis_node : ndarray of int, shape (N,)
    port_vectors : ndarray, shape (N, P)
        Excitation vector of each port for a 1 V source: ``e_m = (1/g) int_gap f_m . t dl``
        (the unit vector of the port basis for a delta gap). Port currents are ``e^T I``.
    load_vectors : ndarray, shape (N, L)
        The same for the loads (delta gaps).
    """

    structure: Structure
    nodes: NDArray[np.float64]
    seg_nodes: NDArray[np.int64]
    seg_radius: NDArray[np.float64]
    seg_wire: NDArray[np.int64]
    seg_piece: NDArray[np.int64]
    half_seg: NDArray[np.int64]
    half_shape: NDArray[np.int64]
    half_sign: NDArray[np.int64]
    half_div: NDArray[np.float64]
    half_cap: NDArray[np.int64]
    cap_nodes: NDArray[np.int64]
    cap_radius: NDArray[np.float64]
    basis_node: NDArray[np.int64]
    port_vectors: NDArray[np.float64]
    load_vectors: NDArray[np.float64]
    port_nodes: list[int]
    load_nodes: list[int]

    @property
    def n_segments(self) -> int:
        return int(self.seg_nodes.shape[0])

    @property
    def n_unknowns(self) -> int:
        return int(self.half_seg.shape[0])

    # Derived geometry is computed once per mesh (the solver reads it many times); the arrays
    # are shared, so treat them as read-only.
    @cached_property
    def seg_start(self) -> NDArray[np.float64]:
        """Start point of each segment in m, (S, 3)."""
        return self.nodes[self.seg_nodes[:, 0]]

    @cached_property
    def seg_end(self) -> NDArray[np.float64]:
        """End point of each segment in m, (S, 3)."""
        return self.nodes[self.seg_nodes[:, 1]]

    @cached_property
    def seg_length(self) -> NDArray[np.float64]:
        """Length of each segment in m, (S,)."""
        return rownorm(self.seg_end - self.seg_start)

    @cached_property
    def seg_dir(self) -> NDArray[np.float64]:
        """Unit direction of each segment, (S, 3)."""
        d = self.seg_end - self.seg_start
        return d / rownorm(d)[:, None]

    @cached_property
    def seg_distance(self) -> NDArray[np.float64]:
        """Shortest distance between every pair of segments in m, (S, S)."""
        return segment_distances(self.seg_start, self.seg_end, self.seg_start, self.seg_end)

    def enclosing_radius(self) -> float:
        """Radius in m of the smallest sphere enclosing the conductors.

        The smallest ball containing the polyline vertices contains every straight piece
        (balls are convex), so Welzl's algorithm runs on the vertices only (E. Welzl,
        "Smallest enclosing disks (balls and ellipsoids)", LNCS 555, 1991); the largest conductor
        half-extent is added for the trace's own width.
        """
        if "_enclosing" not in self.__dict__:
            wires = self.structure.wires
            if len(wires) == 1 and len(wires[0].points) == 2:  # a straight wire: its two ends
                pts = wires[0].points
                r = 0.5 * float(np.linalg.norm(pts[-1] - pts[0]))
            else:
                _, r = min_enclosing_ball(np.unique(np.vstack([w.points for w in wires]), axis=0))
            extent = max(w.section.half_extent_m for w in self.structure.wires)
            self.__dict__["_enclosing"] = r + extent
        return self.__dict__["_enclosing"]


def _merge_points(points: NDArray[np.float64], tol: float
                  ) -> tuple[NDArray[np.float64], NDArray[np.int64]]:
    """Merge points closer than ``tol``: unique nodes and the node index of every point."""
    from scipy.spatial import cKDTree

    n = len(points)
    pairs = cKDTree(points).query_pairs(tol, output_type="ndarray")
    # connected components of the close pairs (union-find; the pairs are few: one per node
    # shared between sub-pieces or wires), each labelled by its smallest point index
    parent = np.arange(n)
    for i, j in pairs.tolist():
        while parent[i] != i:
            i = parent[i]
        while parent[j] != j:
            j = parent[j]
        if i != j:
            parent[max(i, j)] = min(i, j)
    labels = parent
    while True:  # path compression to the roots
        nxt = labels[labels]
        if np.array_equal(nxt, labels):
            break
        labels = nxt
    # number nodes in order of first appearance, keep the first point of each group
    first = np.flatnonzero(labels == np.arange(n))  # roots are the first point of their group
    rank = np.full(n, -1, dtype=np.int64)
    rank[first] = np.arange(len(first))
    return points[first], rank[labels]


def _ball_on(boundary: list[NDArray[np.float64]]) -> tuple[NDArray[np.float64], float]:
    """Smallest ball with all of 1-4 points on its surface (circumscribed ball)."""
    if len(boundary) == 1:
        return boundary[0], 0.0
    a = boundary[0]
    if len(boundary) == 2:
        c = 0.5 * (a + boundary[1])
        return c, float(np.linalg.norm(boundary[1] - c))
    if len(boundary) == 3:
        ab, ac = boundary[1] - a, boundary[2] - a
        nrm = np.cross(ab, ac)
        n2 = float(np.dot(nrm, nrm))
        if n2 <= 1e-30 * float(np.dot(ab, ab) * np.dot(ac, ac)):
            pairs = [(boundary[i], boundary[j]) for i in range(3) for j in range(i + 1, 3)]
            p, q = max(pairs, key=lambda pq: float(np.linalg.norm(pq[0] - pq[1])))
            return _ball_on([p, q])
        c = a + (np.dot(ac, ac) * np.cross(nrm, ab) + np.dot(ab, ab) * np.cross(ac, nrm)) / (
            2.0 * n2)
        return c, float(np.linalg.norm(a - c))
    m = np.array([boundary[i] - a for i in (1, 2, 3)])
    rhs = 0.5 * np.sum(m * m, axis=1)
    try:
        c = a + np.linalg.solve(m, rhs)
    except np.linalg.LinAlgError:
        best = None
        for drop in range(4):
            sub = [boundary[i] for i in range(4) if i != drop]
            cc, rr = _ball_on(sub)
            if all(np.linalg.norm(p - cc) <= rr * (1 + 1e-12) + 1e-15 for p in boundary):
                if best is None or rr < best[1]:
                    best = (cc, rr)
        return best if best is not None else _ball_on(boundary[:3])
    return c, float(np.linalg.norm(a - c))


def min_enclosing_ball(points: NDArray[np.float64]) -> tuple[NDArray[np.float64], float]:
    """Centre and radius of the smallest ball containing ``points`` (n, 3); Welzl's algorithm.

    Iterative move-to-front form with a fixed shuffle (deterministic); exact up to round-off.
    """
    pts = [np.asarray(p, dtype=float) for p in points]
    rng = np.random.default_rng(12345)
    pts = [pts[i] for i in rng.permutation(len(pts))]

    def inside(p: NDArray[np.float64], ball: tuple[NDArray[np.float64], float]) -> bool:
        return float(np.linalg.norm(p - ball[0])) <= ball[1] * (1 + 1e-12) + 1e-15

    def welzl(n: int, boundary: list[NDArray[np.float64]]) -> tuple[NDArray[np.float64], float]:
        ball = _ball_on(boundary) if boundary else (pts[0], 0.0)
        if len(boundary) == 4:
            return ball
        for i in range(n):
            if not boundary and i == 0:
                ball = (pts[0], 0.0)
                continue
            if not inside(pts[i], ball):
                ball = welzl(i, [*boundary, pts[i]])
        return ball

    return welzl(len(pts), [])


def _point_segment_distance(
    p: NDArray[np.float64], a: NDArray[np.float64], b: NDArray[np.float64]
) -> tuple[float, float]:
    """Distance from point ``p`` to segment ``ab`` and the parameter ``t`` of the closest point."""
    d = b - a
    t = min(max(float(np.dot(p - a, d) / np.dot(d, d)), 0.0), 1.0)
    return _norm(a + t * d - p), t


def _norm(v: NDArray[np.float64]) -> float:
    """``np.linalg.norm`` of a real vector (the same ``sqrt(v . v)``), without its overhead."""
    return math.sqrt(float(v.dot(v)))


def _unit_steps(n: int) -> NDArray[np.float64]:
    """``np.linspace(0, 1, n + 1)`` for ``n >= 1``, computed the same way (``i * (1 / n)``, the
    last point exactly 1), without its argument handling."""
    u = np.arange(n + 1, dtype=float)
    u *= 1.0 / n
    u[-1] = 1.0
    return u


def _closest_distance(a0: NDArray[np.float64], d1: NDArray[np.float64], b0: NDArray[np.float64],
                      d2: NDArray[np.float64]) -> NDArray[np.float64]:
    """Classic closest-points-of-two-segments algorithm on broadcastable component arrays.

    ``a0, b0`` start points and ``d1, d2`` direction vectors (end minus start), each of shape
    ``(3, ...)`` (x, y, z first). Clamped parameters with re-projection; elementwise (the sums
    over the components run x + y + z in that order either way), so all-pairs and pair-by-pair
    evaluations give identical numbers.
    """
    add = np.add.reduce
    r = a0 - b0
    a = add(d1 * d1, axis=0)
    e = add(d2 * d2, axis=0)
    f = add(d2 * r, axis=0)
    c = add(d1 * r, axis=0)
    b = add(d1 * d2, axis=0)
    denom = a * e - b * b
    lo, hi = np.maximum, np.minimum  # clip(x, 0, 1) = minimum(maximum(x, 0), 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.where(denom > 1e-14 * a * e, hi(lo((b * f - c * e) / denom, 0.0), 1.0), 0.0)
        t = (b * s + f) / e
        t_c = hi(lo(t, 0.0), 1.0)
        s = np.where(t < 0.0, hi(lo(-c / a, 0.0), 1.0), np.where(t > 1.0,
                     hi(lo((b - c) / a, 0.0), 1.0), s))
    gap = (a0 + s * d1) - (b0 + t_c * d2)
    return np.sqrt(add(gap * gap, axis=0))


def segment_distances(
    a0: NDArray[np.float64], a1: NDArray[np.float64], b0: NDArray[np.float64],
    b1: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Minimum distances between all pairs of 3-D segments ``a`` (rows) and ``b`` (columns).

    Vectorised form of the classic closest-points-of-two-segments algorithm (clamped parameters,
    re-projection), shape ``(len(a0), len(b0))``.
    """
    # components first, (3, n, 1) against (3, 1, m): no reductions over a short last axis
    return _closest_distance(a0.T[:, :, None], (a1 - a0).T[:, :, None], b0.T[:, None, :],
                             (b1 - b0).T[:, None, :])


def paired_segment_distances(
    a0: NDArray[np.float64], a1: NDArray[np.float64], b0: NDArray[np.float64],
    b1: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Minimum distance between segment ``a[i]`` and segment ``b[i]`` for every ``i``: (n,).

    The same numbers as the matching entries of :func:`segment_distances`.
    """
    return _closest_distance(a0.T, (a1 - a0).T, b0.T, (b1 - b0).T)


def segments_within(
    starts: NDArray[np.float64], ends: NDArray[np.float64], limit: NDArray[np.float64] | float
) -> tuple[NDArray[np.int64], NDArray[np.int64], NDArray[np.float64]]:
    """Ordered pairs ``(i, j)`` of segments closer than ``limit`` (scalar or (S, S)) and distances.

    Only pairs whose midpoints are close enough to possibly qualify (``|m_i - m_j| - (L_i + L_j)
    / 2`` is a lower bound of their distance) get the exact :func:`paired_segment_distances`, so
    a long structure costs far less than all ``S^2`` distances; the result equals filtering
    :func:`segment_distances` by ``< limit``.
    """
    mid = 0.5 * (starts + ends)
    half = 0.5 * rownorm(ends - starts)
    gap = 0.0
    for i in range(3):
        di = mid[:, i][:, None] - mid[:, i][None, :]
        gap = gap + di * di
    bound = np.sqrt(gap) - (half[:, None] + half[None, :])
    scale = float(np.max(np.abs(mid))) + float(np.max(half)) + 1e-300
    rows, cols = np.nonzero(bound < limit + 1e-9 * scale)  # margin against rounding
    dist = paired_segment_distances(starts[rows], ends[rows], starts[cols], ends[cols])
    lim = limit if np.ndim(limit) == 0 else np.asarray(limit)[rows, cols]
    keep = dist < lim
    return rows[keep], cols[keep], dist[keep]


@dataclass
class Structure:
    """A wire structure with its ports and loads (SI units).

    Parameters
    ----------
    wires : sequence of Wire
    ports : sequence of Port
    loads : sequence of Load
    """

    wires: Sequence[Wire]
    ports: Sequence[Port] = ()
    loads: Sequence[Load] = ()

    def __post_init__(self) -> None:
        self.wires = list(self.wires)
        self.ports = list(self.ports)
        self.loads = list(self.loads)
        if not self.wires:
            raise GeometryError("a structure needs at least one wire")

    @property
    def size_m(self) -> float:
        pts = np.vstack([w.points for w in self.wires])
        return float(np.max(np.ptp(pts, axis=0)))

    def mesh(
        self,
        f_max_hz: float,
        *,
        kernel: str = "exact",
        rules: MeshRules | None = None,
        segment_length_m: float | None = None,
    ) -> Mesh:
        """Validate and segment the structure.

        Parameters
        ----------
        f_max_hz : float
            Highest frequency the mesh must serve, in Hz (sets the default segment length and the
            thin-wire check).
        kernel : {"exact", "reduced"}
            Kernel the solver will use (sets the shortest allowed segment).
        rules : MeshRules, optional
            Segmentation and validity rules.
        segment_length_m : float, optional
            Target segment length in m for wires without an explicit ``segments`` count
            (overrides ``rules.segments_per_wavelength``).

        Returns
        -------
        Mesh

        Raises
        ------
        GeometryError
            Zero-length pieces, wires that overlap or touch, a radius too large for the thin-wire
            model, segments too short for the kernel, ports or loads not on a wire.
        """
        rules = rules or MeshRules()
        if kernel not in rules.min_length_over_radius:
            raise GeometryError(
                f"unknown kernel {kernel!r}; expected one of {sorted(rules.min_length_over_radius)}"
            )
        if not (f_max_hz > 0 and math.isfinite(f_max_hz)):
            raise GeometryError(f"highest frequency must be positive (got {f_max_hz!r} Hz)")
        lam = materials.C0 / f_max_hz
        k = 2.0 * np.pi / lam
        scale = max(self.size_m, 1e-12)
        tol = 1e-9 * scale

        for w in self.wires:
            a = w.section.equivalent_radius_m
            if k * a > rules.max_ka:
                raise GeometryError(
                    f"wire {w.label}: equivalent radius {a * 1e3:.3g} mm is too large for the "
                    f"thin-wire model at {f_max_hz / 1e6:.6g} MHz (k*a = {k * a:.3g} > "
                    f"{rules.max_ka}); use a narrower trace or a lower band"
                )
            seglen = rownorm(np.diff(w.points, axis=0))
            if np.any(seglen <= tol):
                i = int(np.argmin(seglen))
                raise GeometryError(
                    f"wire {w.label}: piece {i} between vertices {i} and {i + 1} has zero length"
                )

        # --- cut points: ports, loads, and endpoints of other wires lying on a piece (T-joins)
        marks = [("port", i, p.position) for i, p in enumerate(self.ports)]
        marks += [("load", i, ld.position) for i, ld in enumerate(self.loads)]
        endpoints = [(wi, w.points[j]) for wi, w in enumerate(self.wires) for j in (0, -1)]

        # piece list: (wire index, start point, end point, list of interior cut params)
        pieces: list[tuple[int, NDArray[np.float64], NDArray[np.float64], list[float]]] = []
        for wi, w in enumerate(self.wires):
            for j in range(len(w.points) - 1):
                pieces.append((wi, w.points[j], w.points[j + 1], []))

        def locate(pos: NDArray[np.float64]) -> tuple[int, float] | None:
            best: tuple[float, int, float] | None = None
            for pi, (wi, a0, a1, _) in enumerate(pieces):
                d, t = _point_segment_distance(pos, a0, a1)
                limit = max(tol, 1e-3 * self.wires[wi].section.equivalent_radius_m)
                if d <= limit and (best is None or d < best[0]):
                    best = (d, pi, t)
            return None if best is None else (best[1], best[2])

        for kind, i, pos in marks:
            hit = locate(pos)
            if hit is None:
                raise GeometryError(
                    f"{kind} {i} at ({', '.join(f'{x * 1e3:.4g}' for x in pos)}) mm is not on any "
                    "wire"
                )
            pi, t = hit
            L = _norm(pieces[pi][2] - pieces[pi][1])
            if t * L > tol and (1 - t) * L > tol:
                pieces[pi][3].append(t)
        for wi, pos in endpoints:
            for wj, a0, a1, cuts in pieces:
                if wj == wi:
                    continue
                d, t = _point_segment_distance(pos, a0, a1)
                L = _norm(a1 - a0)
                if d <= tol and t * L > tol and (1 - t) * L > tol:
                    cuts.append(t)

        # --- segment each sub-piece
        target = segment_length_m if segment_length_m else lam / rules.segments_per_wavelength
        sub_pts: list[NDArray[np.float64]] = []  # list of (n+1, 3) arrays per sub-piece
        sub_wire: list[int] = []
        sub_piece: list[int] = []
        wire_len = [w.length_m for w in self.wires]
        for pi, (wi, a0, a1, cuts) in enumerate(pieces):
            ts = [0.0, *sorted(set(round(c, 15) for c in cuts)), 1.0]
            w = self.wires[wi]
            for t0, t1 in zip(ts[:-1], ts[1:], strict=True):
                p0 = a0 + t0 * (a1 - a0)
                p1 = a0 + t1 * (a1 - a0)
                L = _norm(p1 - p0)
                if w.segments is not None:
                    n = max(1, round(w.segments * L / wire_len[wi]))
                else:
                    n = max(rules.min_segments_per_piece, math.ceil(L / target - 1e-9))
                u = _unit_steps(n)[:, None]
                sub_pts.append(p0 + u * (p1 - p0))
                sub_wire.append(wi)
                sub_piece.append(pi)

        # --- merge coincident points into nodes (KD-tree pairs within tol, then components)
        all_pts = np.vstack(sub_pts)
        node_arr, index = _merge_points(all_pts, tol)

        # consecutive points of each sub-piece form its segments
        counts = np.array([len(sp) for sp in sub_pts])
        last = np.cumsum(counts) - 1  # index of the last point of each sub-piece
        is_start = np.ones(len(all_pts), dtype=bool)
        is_start[last] = False
        first_pts = np.flatnonzero(is_start)
        seg_nodes = np.empty((len(first_pts), 2), dtype=index.dtype)
        seg_nodes[:, 0] = index[first_pts]
        seg_nodes[:, 1] = index[first_pts + 1]
        n_seg = counts - 1
        seg_wire = np.repeat(np.asarray(sub_wire, dtype=np.int64), n_seg)
        seg_piece = np.repeat(np.asarray(sub_piece, dtype=np.int64), n_seg)
        wire_radius = np.array([w.section.equivalent_radius_m for w in self.wires])
        seg_radius = wire_radius[seg_wire]
        starts = node_arr[seg_nodes[:, 0]]
        ends = node_arr[seg_nodes[:, 1]]
        seg_len = rownorm(ends - starts)

        # --- kernel limit on segment length
        ratio = seg_len / seg_radius
        limit = rules.min_length_over_radius[kernel]
        if np.any(ratio < limit):
            s = int(np.argmin(ratio))
            w = self.wires[seg_wire[s]]
            raise GeometryError(
                f"wire {w.label}: segment of {seg_len[s] * 1e3:.3g} mm is shorter than "
                f"{limit:g} equivalent radii ({seg_radius[s] * 1e3:.3g} mm) allowed by the "
                f"{kernel!r} kernel; use fewer segments"
                + (" or the 'exact' kernel" if kernel == "reduced" else "")
            )

        # --- duplicate segments and overlap / touching between non-neighbouring segments
        key = np.sort(seg_nodes, axis=1)
        key = np.sort(key[:, 0] * len(node_arr) + key[:, 1])
        if np.any(key[1:] == key[:-1]):
            raise GeometryError("two wires overlap: the same segment appears twice")
        if len(pieces) > 1:  # segments of one straight piece never touch but as neighbours
            _check_clearance(self, node_arr, seg_nodes, seg_wire, seg_len, seg_radius)

        # --- basis functions
        basis = _bases(seg_nodes, seg_len, seg_radius, len(node_arr), rules.end_caps)
        if basis is None:
            raise GeometryError("the structure has no node shared by two segments: no current")
        (half_seg, half_shape, half_sign, half_div, half_cap, basis_node, cap_nodes, cap_radius,
         node_first_basis, node_degree) = basis

        mesh = Mesh(
            structure=self,
            nodes=node_arr,
            seg_nodes=seg_nodes,
            seg_radius=seg_radius,
            seg_wire=seg_wire,
            seg_piece=seg_piece,
            half_seg=half_seg,
            half_shape=half_shape,
            half_sign=half_sign,
            half_div=half_div,
            half_cap=half_cap,
            cap_nodes=cap_nodes,
            cap_radius=cap_radius,
            basis_node=basis_node,
            port_vectors=np.zeros((len(basis_node), 0)),
            load_vectors=np.zeros((len(basis_node), 0)),
            port_nodes=[],
            load_nodes=[],
        )
        # the derived geometry computed above, with the numbers the cached properties give
        mesh.__dict__.update(seg_start=starts, seg_end=ends, seg_length=seg_len)

        def gap_node(kind: str, i: int, pos: NDArray[np.float64]) -> int:
            dist = rownorm(node_arr - pos)
            node = int(np.argmin(dist))
            deg = int(node_degree[node])
            if deg != 2:
                where = "a free wire end" if deg == 1 else f"a junction of {deg} segments"
                raise GeometryError(
                    f"{kind} {i} sits on {where}; a gap needs a point inside a wire or where "
                    "exactly two wires meet"
                )
            return node

        used: dict[int, str] = {}
        pv, pn = [], []
        for i, p in enumerate(self.ports):
            node = gap_node("port", i, p.position)
            if node in used:
                raise GeometryError(f"port {i} shares its node with {used[node]}")
            used[node] = f"port {i}"
            pv.append(_gap_vector(mesh, int(node_first_basis[node]), p.gap_m))
            pn.append(node)
        lv, ln = [], []
        for i, ld in enumerate(self.loads):
            node = gap_node("load", i, ld.position)
            if node in used:
                raise GeometryError(f"load {i} shares its node with {used[node]}")
            used[node] = f"load {i}"
            lv.append(_gap_vector(mesh, int(node_first_basis[node]), 0.0))
            ln.append(node)
        n = mesh.n_unknowns
        mesh.port_vectors = np.stack(pv, axis=1) if pv else np.zeros((n, 0))
        mesh.load_vectors = np.stack(lv, axis=1) if lv else np.zeros((n, 0))
        mesh.port_nodes = pn
        mesh.load_nodes = ln
        return mesh


def _check_clearance(
    structure: Structure,
    nodes: NDArray[np.float64],
    seg_nodes: NDArray[np.int64],
    seg_wire: NDArray[np.int64],
    seg_len: NDArray[np.float64],
    seg_radius: NDArray[np.float64],
) -> None:
    """Refuse segments that touch or cross unless they are neighbours along the conductor.

    Two segments whose shortest path along the conductors (through shared nodes) is shorter than
    a few conductor sizes are neighbours; any other pair must keep their surfaces apart.
    """
    s = len(seg_nodes)
    extent = np.array([w.section.half_extent_m for w in structure.wires])[seg_wire]
    starts = nodes[seg_nodes[:, 0]]
    ends = nodes[seg_nodes[:, 1]]
    clearance = extent[:, None] + extent[None, :]
    rows, cols, close = segments_within(starts, ends, clearance)
    upper = rows < cols
    rows, cols, close = rows[upper], cols[upper], close[upper]
    # segments sharing a node are neighbours by definition
    a, b = seg_nodes[rows], seg_nodes[cols]
    share = ((a[:, 0] == b[:, 0]) | (a[:, 0] == b[:, 1]) | (a[:, 1] == b[:, 0])
             | (a[:, 1] == b[:, 1]))
    rows, cols, close = rows[~share], cols[~share], close[~share]
    if not len(rows):
        return
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import shortest_path

    n_nodes = len(nodes)
    graph = coo_matrix(
        (np.r_[seg_len, seg_len], (np.r_[seg_nodes[:, 0], seg_nodes[:, 1]],
                                   np.r_[seg_nodes[:, 1], seg_nodes[:, 0]])),
        shape=(n_nodes, n_nodes),
    ).tocsr()
    involved = np.unique(np.r_[seg_nodes[rows].ravel(), seg_nodes[cols].ravel()])
    sp = shortest_path(graph, directed=False, indices=involved)
    pos = {int(nd): i for i, nd in enumerate(involved)}
    for r, c, dist_rc in zip(rows, cols, close, strict=True):
        along = min(
            sp[pos[int(a)], int(b)] for a in seg_nodes[r] for b in seg_nodes[c]
        )
        if along > 4.0 * (extent[r] + extent[c]) + 1e-12:
            wr = structure.wires[seg_wire[r]]
            wc = structure.wires[seg_wire[c]]
            near = 0.5 * (starts[r] + ends[r])
            raise GeometryError(
                f"wires {wr.label} and {wc.label} overlap or touch near "
                f"({', '.join(f'{x * 1e3:.4g}' for x in near)}) mm: their surfaces are "
                f"{dist_rc * 1e3:.3g} mm apart between axes, less than the conductor size "
                f"{clearance[r, c] * 1e3:.3g} mm"
            )
    del s


def _bases(
    seg_nodes: NDArray[np.int64],
    seg_len: NDArray[np.float64],
    seg_radius: NDArray[np.float64],
    n_nodes: int,
    end_caps: bool,
) -> tuple | None:
    """Triangle bases of a segmented structure (see the module docstring), or ``None``.

    Nodes are visited in increasing order; at a node the segments meeting there are taken in
    increasing order (the node as a start before the node as an end). A node shared by ``k``
    segments carries ``k - 1`` bases from the first segment into each of the others; a free end
    carries an end-cap basis when ``end_caps``.

    Returns
    -------
    tuple or None
        ``half_seg, half_shape, half_sign, half_div, half_cap, basis_node, cap_nodes,
        cap_radius, node_first_basis, node_degree`` (see :class:`Mesh`; ``node_first_basis`` is
        -1 at nodes without an inner basis), or ``None`` when there is no basis at all.
    """
    # incidences 2s + e: node seg_nodes[s, e] (e = 0 start, 1 end), grouped by node
    node_of = seg_nodes.ravel()
    order = np.argsort(node_of, kind="stable")
    node_sorted = node_of[order]
    degree = np.bincount(node_of, minlength=n_nodes)
    group_start = np.cumsum(degree) - degree  # first incidence of each node in `order`
    first = np.zeros(len(order), dtype=bool)
    first[group_start[degree > 0]] = True
    free_end = degree[node_sorted] == 1
    take = ~first | (free_end & end_caps)
    inc = order[take]  # one basis per taken incidence, in node order
    if not len(inc):
        return None
    node = node_sorted[take]
    cap = free_end[take]
    head = order[group_start[node]]  # the first incidence at the basis's node
    s_in, end_in = head // 2, head % 2
    s_out, end_out = inc // 2, inc % 2
    n = len(inc)
    # "in" half: current toward the node on s_in (+t with shape u when the node is its end)
    # "out" half: current away from the node on s_out (+t with shape 1-u when it is its start)
    half_seg, half_shape, half_sign, half_cap = np.empty((4, n, 2), dtype=np.int64)
    half_seg[:, 0] = s_in
    half_seg[:, 1] = np.where(cap, s_in, s_out)
    half_shape[:, 0] = end_in
    half_shape[:, 1] = np.where(cap, 0, end_out)
    half_sign[:, 0] = 2 * end_in - 1  # +1 when the node is the end of s_in
    half_sign[:, 1] = np.where(cap, 0, 1 - 2 * end_out)  # +1 when it is the start of s_out
    half_div = np.empty((n, 2))
    half_div[:, 0] = 1.0 / seg_len[s_in]
    half_div[:, 1] = np.where(cap, -1.0, -1.0 / seg_len[s_out])
    half_cap[:, 0] = -1
    half_cap[:, 1] = np.where(cap, np.cumsum(cap) - 1, -1)
    cap_nodes = node[cap]
    cap_radius = seg_radius[s_in[cap]].astype(float)
    node_first_basis = np.full(n_nodes, -1, dtype=np.int64)
    inner = np.flatnonzero(~cap)
    on = node[inner]  # in node order: the first inner basis of a node starts its run
    first_inner = inner[np.concatenate(([True], on[1:] != on[:-1]))] if len(inner) else inner
    node_first_basis[node[first_inner]] = first_inner
    return (half_seg, half_shape, half_sign, half_div, half_cap, node.astype(np.int64),
            cap_nodes.astype(np.int64), cap_radius, node_first_basis, degree)


def _gap_vector(mesh: Mesh, basis: int, gap_m: float) -> NDArray[np.float64]:
    """Excitation vector of a 1 V gap centred on the node of ``basis``.

    Delta gap (``gap_m = 0``): the unit vector of that basis. Finite gap ``g``: the impressed
    field ``1/g`` along the current direction of ``basis`` over ``g/2`` on each side of the node,
    tested with every basis function (integrated exactly: the bases are linear on segments).
    """
    n = mesh.n_unknowns
    e = np.zeros(n)
    if gap_m <= 0:
        e[basis] = 1.0
        return e
    node = int(mesh.basis_node[basis])
    seg_len = mesh.seg_length
    # Walk away from the node along each of the two halves of the port basis, to distance g/2,
    # collecting (segment, u0, u1, field direction as +-1 along the segment) intervals.
    intervals: list[tuple[int, float, float, float]] = []
    for h in range(2):
        s = int(mesh.half_seg[basis, h])
        # the impressed field follows the port basis current: sign d relative to the segment
        direction = float(mesh.half_sign[basis, h])
        remaining = 0.5 * gap_m
        at_node = node
        while True:
            a, b = (int(x) for x in mesh.seg_nodes[s])
            L = seg_len[s]
            take = min(remaining, L)
            if a == at_node:
                intervals.append((s, 0.0, take / L, direction))
                nxt = b
            else:
                intervals.append((s, 1.0 - take / L, 1.0, direction))
                nxt = a
            remaining -= take
            if remaining <= 1e-15 * gap_m:
                break
            cand = [t for t in np.flatnonzero((mesh.seg_nodes == nxt).any(axis=1)).tolist()
                    if t != s]
            if len(cand) != 1:
                raise GeometryError(
                    f"feed gap of {gap_m * 1e3:.3g} mm runs past a wire end or junction; "
                    "make the gap shorter"
                )
            t = cand[0]
            toward_nxt = (nxt == b) == (direction > 0)
            t_start = int(mesh.seg_nodes[t][0]) == nxt
            # continuity of the flow through node nxt
            direction = (1.0 if t_start else -1.0) if toward_nxt else (-1.0 if t_start else 1.0)
            s, at_node = t, nxt
    # integrate each basis over the intervals: int lambda(u) L du * (1/g) * (sign_h * dir)
    total = np.zeros((n, 2))
    sign = mesh.half_sign.astype(float)
    rising = mesh.half_shape == 1
    for s_i, u0, u1, direction in intervals:
        on = mesh.half_seg == s_i
        if not on.any():
            continue
        up = 0.5 * (u1**2 - u0**2)
        integ = np.where(rising, up, (u1 - u0) - up)
        total += np.where(on, sign * direction * integ * seg_len[s_i], 0.0)
    e[:] = total.sum(axis=1) / gap_m
    return e
