"""Partial inductances of thin straight round conductors and their lumping per conductor.

The partial-inductance method (Ruehli 1972): every straight segment has a partial self
inductance, every pair of segments a partial mutual inductance (Neumann's double integral
``M = mu0/(4 pi) * double-integral dl_a . dl_b / R``), and the lumped inductance of a
conductor, all of whose segments carry one current, is the sum of its block of the partial
matrix (Paul 2010).

The pair formulas are Grover's closed forms (Grover 1946): the general skew case with its
solid-angle term, parallel filaments with arbitrary axial offsets, collinear filaments and
filaments meeting at a point. They broadcast over numpy arrays; special cases are selected
by masks over whole arrays, never by a Python branch per pair.

References
----------
.. [1] E. B. Rosa, "The self and mutual inductances of linear conductors", Bull. Bureau of
   Standards 4(2), 1908.
.. [2] F. W. Grover, "Inductance Calculations", Van Nostrand, 1946 (Dover 2004): ch. 2
   (straight wires), ch. 5 (parallel filaments), ch. 7 (filaments meeting at a point and
   filaments in any position).
.. [3] A. E. Ruehli, "Inductance calculations in a complex integrated circuit environment",
   IBM J. Res. Dev. 16(5), 1972.
.. [4] C. R. Paul, "Inductance: Loop and Partial", Wiley, 2010.
"""

from __future__ import annotations

import itertools
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from augment.errors import GeometryError

# vacuum permeability, CODATA 2022 (the value of scipy.constants.mu_0, written out so that
# importing this module does not import scipy: `augment build` should start quickly)
MU0: float = 1.25663706127e-6

_K = MU0 / (4.0 * np.pi)

# Below this |sin| between the directions the parallel form is used. The skew form's
# rounding error grows like 1e-16 / sin**2 (measured against dblquad: 7 % at 2e-8, 1e-6 at
# 1e-5), and the parallel form's like sin l / (2 d) (5e-5 at 1e-5 with l/d = 100). At 3e-6
# both stay near 1.5e-5.
_PARALLEL_SIN = 3e-6

# Largest tile of pairs kept in flight: temporaries of this size stay in the CPU's L2 cache.
_TILE_PAIRS = 1 << 14


def self_inductance(length, radius, *, skin_effect=False) -> np.ndarray:
    """Partial self inductance of a straight round wire.

    ``L = mu0/(2 pi) [l ln((l + sqrt(l^2 + r^2))/r) - sqrt(l^2 + r^2) + l/4 + r]``

    Parameters
    ----------
    length : array_like
        Wire length ``l`` in metres, > 0.
    radius : array_like
        Wire radius ``r`` in metres, > 0.
    skin_effect : bool, optional
        If True, the current flows on the surface and the internal term ``l/4`` is dropped.

    Returns
    -------
    numpy.ndarray
        Partial self inductance in henries, broadcast over the inputs.

    Notes
    -----
    The exact form of Rosa for uniform current, valid for any ratio ``l/r``; for
    ``l >> r`` it tends to ``mu0 l/(2 pi) (ln(2l/r) - 3/4)`` (``-1`` with skin effect).
    The difference ``r - sqrt(l^2 + r^2)`` is evaluated as ``-l^2/(r + sqrt(l^2 + r^2))``
    so that short stubs keep their digits.

    References
    ----------
    .. [1] Rosa 1908, eq. for a straight cylindrical wire; Grover 1946, ch. 2, eq. (7).

    Examples
    --------
    >>> float(self_inductance(0.1, 0.5e-3)) * 1e9  # doctest: +ELLIPSIS
    105.9...
    """
    l = np.asarray(length, dtype=np.float64)
    r = np.asarray(radius, dtype=np.float64)
    root = np.hypot(l, r)
    external = l * np.arcsinh(l / r) - l * l / (r + root)
    internal = 0.0 if skin_effect else 0.25 * l
    return 2.0 * _K * (external + internal)


def mutual_filaments(a_start, a_end, b_start, b_end) -> np.ndarray:
    """Partial mutual inductance of pairs of straight filaments in any relative position.

    ``M = mu0/(4 pi) * integral over a, integral over b of dl_a . dl_b / R``

    Parameters
    ----------
    a_start, a_end, b_start, b_end : array_like, shape (n, 3)
        End points in metres; the direction of each filament is from start to end.

    Returns
    -------
    numpy.ndarray, shape (n,)
        Mutual inductance in henries; positive when the directions are aligned. Collinear
        filaments that overlap over a positive length give ``+-inf`` (the integral diverges).

    Notes
    -----
    Non-parallel pairs (``|sin theta| >= 3e-6``) use Grover's closed form for filaments in
    any position, written in coordinates ``s, t`` measured from the feet of the common
    perpendicular (length ``d``) of the two lines::

        I = s2 G(s2) - s1 G(s1) + t2 H(t2) - t1 H(t1) - (d / sin theta) Omega
        G(s) = 2 atanh(m / (R(s, t1) + R(s, t2))),  H(t) = 2 atanh(l / (R(s1, t) + R(s2, t)))
        Omega = sum over corners (-1)^(i+j) atan((d^2 cos + s_i t_j sin^2) / (d R_ij sin))

    and ``M = mu0/(4 pi) cos(theta) I``. Filaments that meet or cross (``d = 0``) are the
    same formula: the solid-angle term vanishes, and a coefficient ``s`` or ``t`` that is
    zero at a shared end point multiplies a logarithmic singularity whose product tends to
    zero, which is substituted exactly (this gives Grover's formula for filaments meeting
    at a point, with the sign flip for current through the corner built in). Perpendicular
    pairs give exactly zero through ``cos theta``.

    Parallel pairs (``|sin theta| < 3e-6``) use the four-term form with arbitrary axial
    offsets ``M = +-mu0/(4 pi) [F(t2) - F(t2 - l) - F(t1) + F(t1 - l)]``,
    ``F(x) = x asinh(x/d) - sqrt(x^2 + d^2)``, and for collinear pairs (``d = 0``) its
    limit ``F(x) = |x| ln|x| - |x|``. The skew form's rounding error grows like
    ``1e-16 / sin**2 theta``, the parallel form errs by about ``|sin theta| l / (2 d)``; at
    the switch both are near 1.5e-5 for ``l / d = 100`` (measured against ``dblquad``).

    References
    ----------
    .. [1] Grover 1946, ch. 7, "filaments in any desired positions" (general case with the
       solid-angle term) and "filaments meeting at a point".
    .. [2] Grover 1946, ch. 5, parallel filaments of unequal lengths with any offset.
    """
    a0, a1, b0, b1 = (np.asarray(x, dtype=np.float64).reshape(-1, 3) for x in (a_start, a_end, b_start, b_end))
    la, ua = _lengths_and_directions(a0, a1)
    lb, ub = _lengths_and_directions(b0, b1)
    integral, parallel = _pair_integral(a0.T, a1.T, ua.T, la, b0.T, b1.T, ub.T, lb)
    if parallel.any():
        p = parallel
        integral[p] = _parallel_integral(a0[p].T, a1[p].T, ua[p].T, la[p], b0[p].T, b1[p].T, ub[p].T)
    return _K * integral


def lumped_inductance(starts, ends, radii, owner, n_conductors, *, skin_effect=False, chunk_pairs=2_000_000) -> np.ndarray:
    """Lumped inductance matrix of conductors made of straight round segments.

    ``L_c = sum_{i in c} L_i + 2 sum_{i<j in c} M_ij``,  ``M_cd = sum_{i in c, j in d} M_ij``

    Parameters
    ----------
    starts, ends : array_like, shape (n, 3)
        Segment end points in metres; each segment points from start to end, along its
        conductor's direction.
    radii : array_like, shape (n,)
        Wire radius of each segment in metres.
    owner : array_like of int, shape (n,)
        Index of the conductor each segment belongs to, in ``range(n_conductors)``.
    n_conductors : int
        Number of conductors.
    skin_effect : bool, optional
        Use the surface-current forms (no internal inductance) instead of uniform current.
    chunk_pairs : int, optional
        Upper bound on the number of segment pairs evaluated in one vectorised step
        (memory bound); the kernel uses tiles of at most 16,384 pairs, which is faster.

    Returns
    -------
    numpy.ndarray, shape (n_conductors, n_conductors)
        Symmetric lumped matrix in henries, read-only.

    Notes
    -----
    Only pairs ``i < j`` are evaluated, tile by tile, and summed per conductor pair with
    ``np.bincount``. Coordinates are shifted to their centroid first so that differences
    keep their digits far from the origin.

    Parallel segments closer than the sum of their radii whose axial extents overlap would
    diverge as filaments. For them the distance is replaced by the geometric mean distance
    (Maxwell's GMD) ``g = sqrt(r_a r_b) exp(-1/4)`` for uniform current (``sqrt(r_a r_b)``
    with skin effect), taken as ``max(d, g)``; this is an approximation for partly
    overlapping cross-sections. Segments that coincide exactly (same end points, either
    direction) share one wire, so their mutual is exactly ``+-`` the wire's self
    inductance (radius ``sqrt(r_a r_b)``), and the lumped matrix becomes singular: see
    :func:`check_positive_definite`.

    References
    ----------
    .. [1] Ruehli 1972; Paul 2010, ch. 5 (partial inductances and their sums).
    .. [2] Grover 1946, ch. 2 (geometric mean distance of a circle to itself, r exp(-1/4)).
    """
    p0 = np.asarray(starts, dtype=np.float64).reshape(-1, 3)
    p1 = np.asarray(ends, dtype=np.float64).reshape(-1, 3)
    r = np.asarray(radii, dtype=np.float64).reshape(-1)
    own = np.asarray(owner, dtype=np.intp).reshape(-1)
    n = len(p0)
    centre = np.concatenate([p0, p1]).mean(axis=0) if n else np.zeros(3)
    p0 = p0 - centre
    p1 = p1 - centre
    length, direction = _lengths_and_directions(p0, p1)
    gmd = r * (1.0 if skin_effect else np.exp(-0.25))

    cross = np.zeros((n_conductors, n_conductors))
    np.add.at(cross, (own, own), 0.5 * self_inductance(length, r, skin_effect=skin_effect))
    edge = max(1, int(np.sqrt(min(chunk_pairs, _TILE_PAIRS))))
    cols = (p0.T.copy(), p1.T.copy(), direction.T.copy())
    for i0 in range(0, n, edge):
        rows = slice(i0, min(i0 + edge, n))
        for j0 in range(i0, n, edge):
            columns = slice(j0, min(j0 + edge, n))
            block = _tile(p0, p1, direction, length, r, gmd, cols, rows, columns, skin_effect)
            if j0 == i0:
                block = np.triu(block, 1)
            _accumulate(cross, block, own[rows], own[columns])
    _soften_joined_pairs(cross, p0, p1, direction, own, gmd)
    matrix = cross + cross.T
    matrix.flags.writeable = False
    return matrix


def coupling_coefficients(matrix) -> np.ndarray:
    """Coupling coefficients of an inductance matrix.

    ``k_ij = M_ij / sqrt(L_i L_j)``, with ``k_ii = 1``.

    Parameters
    ----------
    matrix : array_like, shape (m, m)
        Symmetric inductance matrix in henries with positive diagonal.

    Returns
    -------
    numpy.ndarray, shape (m, m)
        Dimensionless coupling coefficients; ``|k| < 1`` off the diagonal for a positive
        definite matrix.

    References
    ----------
    .. [1] Paul 2010, ch. 5 (coupling coefficient of two inductors).
    """
    m = np.asarray(matrix, dtype=np.float64)
    scale = 1.0 / np.sqrt(np.diag(m))
    k = m * scale[:, None] * scale[None, :]
    np.fill_diagonal(k, 1.0)
    return k


def check_positive_definite(matrix, ids: Sequence[str]) -> None:
    """Check that a lumped inductance matrix is symmetric positive definite (Cholesky).

    Parameters
    ----------
    matrix : array_like, shape (m, m)
        Lumped inductance matrix in henries.
    ids : sequence of str
        Conductor ids, one per row, used in the message.

    Raises
    ------
    augment.errors.GeometryError
        If the matrix has non-finite entries, a non-positive self inductance, or no
        Cholesky factor; the message names the two conductors with the largest ``|k|``.

    Notes
    -----
    Magnetic energy ``I^T L I / 2`` is positive for any currents, so a physical matrix is
    positive definite and every ``|k| < 1``. Failure almost always means two conductors
    overlap or touch (coincident segments, or one wire lying on another within the sum
    of their radii), where the thin-wire model breaks down.
    """
    m = np.asarray(matrix, dtype=np.float64)
    if not np.all(np.isfinite(m)):
        i, j = np.argwhere(~np.isfinite(m))[0]
        raise GeometryError(
            f"inductance between {ids[i]} and {ids[j]} is infinite: two collinear segments "
            "overlap as filaments; give them radii or move them apart"
        )
    diag = np.diag(m)
    if np.any(diag <= 0.0):
        i = int(np.argmin(diag))
        raise GeometryError(f"self inductance of {ids[i]} is {diag[i]:.4g} H, not positive: its segments overlap")
    try:
        np.linalg.cholesky(m)
    except np.linalg.LinAlgError:
        if len(m) < 2:
            raise GeometryError(f"inductance matrix of {ids[0]} is not positive definite") from None
        k = np.abs(coupling_coefficients(m))
        np.fill_diagonal(k, -np.inf)
        i, j = np.unravel_index(int(np.argmax(k)), k.shape)
        raise GeometryError(
            f"inductance matrix is not positive definite: {ids[i]} and {ids[j]} have coupling "
            f"coefficient |k| = {k[i, j]:.6f} (a physical |k| is below 1); this usually means "
            "the two conductors overlap or touch"
        ) from None


@dataclass(frozen=True, slots=True)
class InductanceMatrix:
    """Lumped inductances of a conductor graph: one row per conductor, in graph order.

    ``henry[i, i]`` is conductor i's lumped self inductance, ``henry[i, j]`` the lumped mutual
    of i and j with the sign of their own directions. ``reference_mutual`` holds, for each
    probe's zero-area path (``local:NAME``, straight from plus point to minus point), its
    mutual inductance with every conductor.
    """

    ids: tuple[str, ...]
    henry: np.ndarray
    segments: tuple[int, ...]
    lengths_m: tuple[float, ...]
    reference_ids: tuple[str, ...]
    reference_mutual: np.ndarray

    def index(self, conductor_id: str) -> int:
        return self.ids.index(conductor_id)


def _local_radius(graph, setup) -> float:
    """Radius of a probe's zero-area path: that of a conductor lying exactly along it, if any.

    Across a body the zero-area path is the body itself; giving it the body's radius makes
    its mutual with the body equal the body's self inductance, so the local reading is the
    element's own drop whatever the probe's lead radius.
    """
    a, b = setup.local_points[0], setup.local_points[-1]
    for c in graph.conductors:
        if c.kind != "probe" and len(c.points) == 2:
            p, q = c.points[0], c.points[-1]
            if (np.allclose(p, a) and np.allclose(q, b)) or (np.allclose(p, b) and np.allclose(q, a)):
                return c.radius
    return graph.conductor(setup.conductor).radius


def extract(graph) -> InductanceMatrix:
    """Lumped inductance matrix of every conductor of ``graph`` and of the zero-area paths.

    Each conductor's segments carry one current, so its lumped self inductance is the sum of
    its block of the partial-inductance matrix and a lumped mutual is the sum of a cross
    block (Ruehli 1972; Paul 2010, ch. 5): exact, and it keeps the netlist small.
    """
    starts, ends, radii, owner = [], [], [], []
    ids = [c.id for c in graph.conductors]
    for n, c in enumerate(graph.conductors):
        a, b = c.segments
        starts.append(a)
        ends.append(b)
        radii.append(np.full(len(a), c.radius))
        owner.append(np.full(len(a), n))
    reference_ids = []
    for setup in graph.probes:
        reference_ids.append(f"local:{setup.name}")
        starts.append(setup.local_points[:-1])
        ends.append(setup.local_points[1:])
        radii.append(np.full(len(setup.local_points) - 1, _local_radius(graph, setup)))
        owner.append(np.full(len(setup.local_points) - 1, len(ids) + len(reference_ids) - 1))
    total = len(ids) + len(reference_ids)
    if not starts:
        empty = np.zeros((0, 0))
        return InductanceMatrix((), empty, (), (), (), np.zeros((0, 0)))
    full = lumped_inductance(
        np.concatenate(starts),
        np.concatenate(ends),
        np.concatenate(radii),
        np.concatenate(owner),
        total,
        skin_effect=graph.skin_effect,
    )
    henry = np.array(full[: len(ids), : len(ids)])
    reference = np.array(full[len(ids) :, : len(ids)])
    henry.flags.writeable = False
    reference.flags.writeable = False
    return InductanceMatrix(
        ids=tuple(ids),
        henry=henry,
        segments=tuple(len(c.segments[0]) for c in graph.conductors),
        lengths_m=tuple(float(c.length_m) for c in graph.conductors),
        reference_ids=tuple(reference_ids),
        reference_mutual=reference,
    )


def _soften_joined_pairs(cross, p0, p1, direction, own, gmd) -> None:
    """Thick-wire mutuals for segments of two conductors that leave a joint side by side.

    The loader keeps conductors apart by the sum of their radii except where they are
    joined, so only these pairs can overlap as wires. Two segments leaving one end point
    at less than 90 degrees to each other run inside each other's copper near the joint,
    where the filament form keeps growing as the angle closes (a lead laid along a part's
    body would link more than the body's own self inductance). For them the kernel 1/R
    becomes 1/sqrt(R^2 + g^2), g the pair's GMD: the same as the GMD substitution of
    parallel pairs, and within (g/R)^2 of the filament form away from the joint. Segments
    that carry on from a joint (a wire split at a junction, bending by less than 90
    degrees) keep the filament form, as the segments of one conductor do. The change is
    added to ``cross`` (upper pairs, in H).
    """
    # segments by end point; +1 where the point is a segment's start, -1 where it is its end
    at: dict[tuple[float, float, float], list[tuple[int, int]]] = {}
    for k, (start, end) in enumerate(zip(p0.tolist(), p1.tolist())):
        at.setdefault(tuple(start), []).append((k, 1))
        at.setdefault(tuple(end), []).append((k, -1))
    pairs = [(*a, *b) if a[0] < b[0] else (*b, *a)
             for members in at.values() for a, b in itertools.combinations(members, 2) if own[a[0]] != own[b[0]]]
    if not pairs:
        return
    i, side_i, j, side_j = np.array(pairs).T
    cos = np.einsum("pk,pk->p", direction[i], direction[j])
    sin = np.linalg.norm(np.cross(direction[i], direction[j]), axis=1)
    # leaving the joint less than 90 degrees apart; parallel pairs already take the GMD form
    keep = (side_i * side_j * cos > 0.0) & (sin >= _PARALLEL_SIN)
    i, j, joint_at_end = i[keep], j[keep], side_i[keep] < 0
    if len(i) == 0:
        return
    filament = mutual_filaments(p0[i], p1[i], p0[j], p1[j])
    softened = _softened_mutual(p0[i], p1[i], p0[j], p1[j], np.sqrt(gmd[i] * gmd[j]), joint_at_end)
    np.add.at(cross, (own[i], own[j]), softened - filament)


# Gauss-Legendre panels graded towards a joint: breakpoints as fractions of the segment.
_JOINT_BREAKS = np.array([0.0, 1e-4, 1e-3, 1e-2, 0.05, 0.2, 0.5, 1.0])
_GL_NODES, _GL_WEIGHTS = np.polynomial.legendre.leggauss(12)


def _softened_mutual(a0, a1, b0, b1, g, joint_at_end) -> np.ndarray:
    """mu0/(4 pi) (ua . ub) double-integral ds dt / sqrt(R^2 + g^2) for segment pairs (rows).

    The inner integral along b is closed (two asinh terms); the outer one along a is
    Gauss-Legendre on panels graded towards the joint: a's end where ``joint_at_end``,
    else its start.
    """
    la, ua = _lengths_and_directions(a0, a1)
    lb, ub = _lengths_and_directions(b0, b1)
    # measure s from the joint, so the panels crowd there
    origin = np.where(joint_at_end[:, None], a1, a0)
    toward = np.where(joint_at_end[:, None], -ua, ua)
    lo, hi = _JOINT_BREAKS[:-1], _JOINT_BREAKS[1:]
    fraction = (0.5 * (hi - lo)[:, None] * _GL_NODES[None, :] + 0.5 * (hi + lo)[:, None]).ravel()
    weight = (0.5 * (hi - lo)[:, None] * _GL_WEIGHTS[None, :]).ravel()
    s = fraction[None, :] * la[:, None]
    points = origin[:, None, :] + s[:, :, None] * toward[:, None, :]
    offset = points - b0[:, None, :]
    t0 = np.einsum("pqk,pk->pq", offset, ub)
    rho2 = np.maximum(np.einsum("pqk,pqk->pq", offset, offset) - t0 * t0, 0.0) + (g * g)[:, None]
    rho = np.sqrt(rho2)
    inner = np.arcsinh((lb[:, None] - t0) / rho) + np.arcsinh(t0 / rho)
    integral = la * np.sum(weight[None, :] * inner, axis=1)
    return _K * np.einsum("pk,pk->p", ua, ub) * integral


def _lengths_and_directions(start: np.ndarray, end: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    delta = end - start
    length = np.sqrt(np.einsum("ij,ij->i", delta, delta))
    return length, delta / length[:, None]


def _pair_integral(a0, a1, ua, la, b0, b1, ub, lb) -> tuple[np.ndarray, np.ndarray]:
    """``cos(theta) * double-integral ds dt / R`` of the skew form, and the parallel mask.

    Components come as 3-sequences of broadcastable arrays; entries under the mask are
    meaningless and must be replaced by :func:`_parallel_integral`.
    """
    # overflow, like 0/0, happens only under the parallel mask (sin < 3e-6), whose entries are replaced
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        wx, wy, wz = b0[0] - a0[0], b0[1] - a0[1], b0[2] - a0[2]
        r11 = np.sqrt(wx * wx + wy * wy + wz * wz)
        r12 = _distance(a0, b1)
        r21 = _distance(a1, b0)
        r22 = _distance(a1, b1)
        cos = ua[0] * ub[0] + ua[1] * ub[1] + ua[2] * ub[2]
        nx = ua[1] * ub[2] - ua[2] * ub[1]
        ny = ua[2] * ub[0] - ua[0] * ub[2]
        nz = ua[0] * ub[1] - ua[1] * ub[0]
        sin2 = nx * nx + ny * ny + nz * nz
        sin = np.sqrt(sin2)
        parallel = sin < _PARALLEL_SIN
        d = np.abs(wx * nx + wy * ny + wz * nz) / sin
        # w . (u - cos v) rather than w.u - cos w.v: near-parallel lines keep 1/sin, not 1/sin^2.
        s_foot = (wx * (ua[0] - cos * ub[0]) + wy * (ua[1] - cos * ub[1]) + wz * (ua[2] - cos * ub[2])) / sin2
        t_foot = (wx * (cos * ua[0] - ub[0]) + wy * (cos * ua[1] - ub[1]) + wz * (cos * ua[2] - ub[2])) / sin2
        s1, s2 = -s_foot, la - s_foot
        t1, t2 = -t_foot, lb - t_foot
        linear = s2 * _log_ratio(r21 + r22, lb) - s1 * _log_ratio(r11 + r12, lb)
        linear += t2 * _log_ratio(r12 + r22, la) - t1 * _log_ratio(r11 + r21, la)
        # Omega as two angle differences, each an arg of z_1 conj(z_2), z = d R sin + i X.
        dc = d * d * cos
        ds = d * sin
        x11, x12, x21, x22 = dc + s1 * t1 * sin2, dc + s1 * t2 * sin2, dc + s2 * t1 * sin2, dc + s2 * t2 * sin2
        y11, y12, y21, y22 = ds * r11, ds * r12, ds * r21, ds * r22
        omega = np.arctan2(x11 * y12 - y11 * x12, y11 * y12 + x11 * x12)
        omega += np.arctan2(x22 * y21 - y22 * x21, y22 * y21 + x22 * x21)
        integral = cos * (linear - d / sin * omega)
    return np.broadcast_to(integral, parallel.shape).copy(), np.broadcast_to(parallel, parallel.shape)


def _distance(p, q) -> np.ndarray:
    dx, dy, dz = q[0] - p[0], q[1] - p[1], q[2] - p[2]
    return np.sqrt(dx * dx + dy * dy + dz * dz)


def _log_ratio(rsum, length) -> np.ndarray:
    """``2 atanh(length / rsum)``, and 0 where it is infinite (its coefficient is then 0)."""
    g = np.log((rsum + length) / (rsum - length))
    np.copyto(g, 0.0, where=~(g < np.inf))
    return g


def _parallel_integral(a0, a1, ua, la, b0, b1, ub, *, gmd=None, contact=None, radius=None, skin_effect=False):
    """``+-double-integral ds dt / R`` for parallel filaments (1-D component arrays).

    With ``gmd``, ``contact`` (sum of radii) and ``radius`` given, pairs closer than
    ``contact`` with overlapping extent use ``max(d, gmd)``, and coincident pairs the self
    inductance (in units of mu0/(4 pi)).
    """
    sign = np.sign(ua[0] * ub[0] + ua[1] * ub[1] + ua[2] * ub[2])
    p = _axial(a0, a1, ua, la, b0)
    q = _axial(a0, a1, ua, la, b1)
    mx = 0.5 * (b0[0] + b1[0]) - a0[0]
    my = 0.5 * (b0[1] + b1[1]) - a0[1]
    mz = 0.5 * (b0[2] + b1[2]) - a0[2]
    along = mx * ua[0] + my * ua[1] + mz * ua[2]
    d = np.sqrt(np.maximum(mx * mx + my * my + mz * mz - along * along, 0.0))
    # d comes from a difference of squares, good to about sqrt(eps) * scale (1.5e-8): below
    # a few times that the filaments are collinear within rounding, and treated so exactly
    scale = np.sqrt(mx * mx + my * my + mz * mz) + la
    d = np.where(d <= 1e-7 * scale, 0.0, d)
    t1, t2 = np.minimum(p, q), np.maximum(p, q)
    overlap = np.minimum(t2, la) - np.maximum(t1, 0.0)
    if gmd is not None:
        close = (d < contact) & (overlap > 0.0)
        d = np.where(close, np.maximum(d, gmd), d)
    with np.errstate(divide="ignore", invalid="ignore"):
        total = _four_term(t2, d) - _four_term(t2 - la, d) - _four_term(t1, d) + _four_term(t1 - la, d)
    total = np.where((d == 0.0) & (overlap > 0.0), np.inf, total)
    if radius is not None:
        same = _same_points(a0, b0) & _same_points(a1, b1) | _same_points(a0, b1) & _same_points(a1, b0)
        self_term = self_inductance(la, radius, skin_effect=skin_effect) / _K
        total = np.where(same, self_term, total)
    return sign * total


def _axial(a0, a1, ua, la, point) -> np.ndarray:
    """Position of ``point`` along filament a, exact at a's own end points."""
    x = (point[0] - a0[0]) * ua[0] + (point[1] - a0[1]) * ua[1] + (point[2] - a0[2]) * ua[2]
    x = np.where(_same_points(point, a0), 0.0, x)
    return np.where(_same_points(point, a1), la, x)


def _same_points(p, q) -> np.ndarray:
    return (p[0] == q[0]) & (p[1] == q[1]) & (p[2] == q[2])


def _four_term(x, d) -> np.ndarray:
    """Grover's ``F(x) = x asinh(x/d) - sqrt(x^2 + d^2)``; ``|x| ln|x| - |x|`` at ``d = 0``."""
    ax = np.abs(x)
    collinear = np.where(ax > 0.0, ax * np.log(ax), 0.0) - ax
    return np.where(d > 0.0, x * np.arcsinh(x / d) - np.hypot(x, d), collinear)


def _tile(p0, p1, direction, length, r, gmd, cols, rows, columns, skin_effect) -> np.ndarray:
    """Partial mutuals (H) of segments ``rows`` x ``columns`` as a 2-D block."""
    a0 = p0[rows].T[:, :, None]
    a1 = p1[rows].T[:, :, None]
    ua = direction[rows].T[:, :, None]
    la = length[rows][:, None]
    b0 = cols[0][:, None, columns]
    b1 = cols[1][:, None, columns]
    ub = cols[2][:, None, columns]
    lb = length[columns][None, :]
    integral, parallel = _pair_integral(a0, a1, ua, la, b0, b1, ub, lb)
    if parallel.any():
        i, j = np.nonzero(parallel)
        i_seg = np.arange(p0.shape[0])[rows][i]
        j_seg = np.arange(p0.shape[0])[columns][j]
        integral[i, j] = _parallel_integral(
            p0[i_seg].T, p1[i_seg].T, direction[i_seg].T, length[i_seg],
            p0[j_seg].T, p1[j_seg].T, direction[j_seg].T,
            gmd=np.sqrt(gmd[i_seg] * gmd[j_seg]), contact=r[i_seg] + r[j_seg],
            radius=np.sqrt(r[i_seg] * r[j_seg]), skin_effect=skin_effect,
        )
    integral *= _K
    return integral


def _accumulate(cross: np.ndarray, block: np.ndarray, own_rows: np.ndarray, own_cols: np.ndarray) -> None:
    """Add a block of partial mutuals into the conductor-pair sums."""
    rows, inv_r = np.unique(own_rows, return_inverse=True)
    cols, inv_c = np.unique(own_cols, return_inverse=True)
    if len(rows) == 1 and len(cols) == 1:
        cross[rows[0], cols[0]] += block.sum()
        return
    key = inv_r[:, None] * len(cols) + inv_c[None, :]
    sums = np.bincount(key.ravel(), weights=block.ravel(), minlength=len(rows) * len(cols))
    cross[np.ix_(rows, cols)] += sums.reshape(len(rows), len(cols))
