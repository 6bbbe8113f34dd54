"""Electrode geometry: straight conductors from the case, merged, noded and cut into segments.

Every electrode becomes straight conductors; collinear overlaps are merged; conductors are cut at
crossings, junctions and soil-layer interfaces; each piece is divided into equal segments no longer
than ``max_segment``. Coordinates are (x, y, z) in m with z the depth, positive downward.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..case.model import Case
from ..errors import CaseError, ModelTooLargeError

#: Distance below which two points are the same node, m.
NODE_TOLERANCE = 1e-6
#: Most straight conductors a case may make (junction finding compares every pair of them).
MAX_CONDUCTORS = 2000
#: Shortest piece a cut may leave, m, unless the conductor's diameter is longer: a piece shorter than the
#: conductor is thick is not a wire (its leakage per metre is meaningless) and is merged into its neighbour.
MIN_PIECE = 1e-3
#: Rod ends refined: each rod's first and last segment is cut again at these fractions of its length from the end
#: (a quarter, a quarter and a half; a fence post of one segment into quarters). The leakage density rises steeply
#: at a rod's ends, and the surface potential above a rod or post that reaches the surface follows it: without
#: this the step voltage beside the bonded fence posts of a demo came out 8.7 % below the same model at a quarter
#: of the segment length, outside its error bar; with it 0.2 % (tests/test_uncertainty.py, every demo and golden
#: case against a model four times finer).
ROD_END_GRADING = (0.25, 0.5)
#: Axes closer than this are touching whatever the radii, m (the former fixed tolerance).
TOUCH_TOLERANCE = 1e-4


@dataclass(frozen=True)
class Conductors:
    """Straight conductors after merging collinear overlaps.

    Attributes
    ----------
    start, end : ndarray, shape (M, 3)
        End points, m.
    radius : ndarray, shape (M,)
        Conductor radius, m.
    keys : tuple of str
        Case-file key path(s) each conductor came from.
    is_rod : ndarray of bool, shape (M,)
        True for vertical rods.
    group : ndarray of int, shape (M,)
        Potential group: 0 for the energised system (``electrodes`` and bonded separate electrodes),
        g ≥ 1 for ``case.separate_electrodes[g − 1]`` when it floats or is tied to remote earth.
    """

    start: np.ndarray
    end: np.ndarray
    radius: np.ndarray
    keys: tuple[str, ...]
    is_rod: np.ndarray
    group: np.ndarray = None

    @property
    def length(self) -> np.ndarray:
        """Conductor lengths, m."""
        return np.linalg.norm(self.end - self.start, axis=1)

    def matching(self, prefixes) -> np.ndarray:
        """Which conductors came (wholly or partly) from case-file key paths starting with one of
        ``prefixes`` (e.g. ``separate_electrodes[0]``, ``electrodes.conductors[2]``); bool, shape (M,)."""
        def hit(key: str) -> bool:
            return any(part == p or part.startswith(p + ".") for part in key.split(" + ") for p in prefixes)
        return np.array([hit(k) for k in self.keys], bool)


@dataclass(frozen=True)
class Segments:
    """The discretised electrode system.

    Attributes
    ----------
    start, end : ndarray, shape (N, 3)
        Segment end points, m.
    radius : ndarray, shape (N,)
        Conductor radius, m.
    conductor : ndarray of int, shape (N,)
        Index of the conductor each segment belongs to.
    conductors : Conductors
        The conductors.
    warnings : tuple of str
        Things the user should know about how the geometry was interpreted.
    graded : int
        Segments added by refining the rods' ends (:data:`ROD_END_GRADING`).
    """

    start: np.ndarray
    end: np.ndarray
    radius: np.ndarray
    conductor: np.ndarray
    conductors: Conductors
    warnings: tuple[str, ...] = field(default=())
    graded: int = 0

    def __len__(self) -> int:
        return len(self.radius)

    @property
    def base_count(self) -> int:
        """Segments before the rods' ends were refined: the count that scales with the segment length (the
        refined end pieces scale with the end segment, so two discretisations' ratio is taken on these)."""
        return len(self) - self.graded

    @property
    def length(self) -> np.ndarray:
        """Segment lengths, m."""
        return np.linalg.norm(self.end - self.start, axis=1)

    @property
    def midpoint(self) -> np.ndarray:
        """Segment midpoints, m, shape (N, 3)."""
        return 0.5 * (self.start + self.end)

    @property
    def total_length(self) -> float:
        """Total electrode length, m."""
        return float(self.length.sum())

    @property
    def is_rod(self) -> np.ndarray:
        """True for segments of vertical rods."""
        return self.conductors.is_rod[self.conductor]

    @property
    def group(self) -> np.ndarray:
        """Potential group of each segment (see :class:`Conductors`)."""
        return self.conductors.group[self.conductor]


def electrode_lines(case: Case) -> tuple[np.ndarray, np.ndarray, np.ndarray, list[str], np.ndarray, np.ndarray]:
    """All electrodes of a case as straight lines: (start, end, radius, key, is_rod, group)."""
    starts, ends, radii, keys, rods, groups = [], [], [], [], [], []
    systems = [(case.electrodes, 0)] + [(e, 0 if e.connection == "bonded" else k)
                                        for k, e in enumerate(case.separate_electrodes, start=1)]
    for el, group in systems:
        for g in el.grids:
            (ox, oy), (lx, ly), (nx, ny) = g.origin, g.size, g.meshes
            for j in range(ny + 1):
                y = oy + ly * j / ny
                starts.append((ox, y, g.depth)); ends.append((ox + lx, y, g.depth))
            for i in range(nx + 1):
                x = ox + lx * i / nx
                starts.append((x, oy, g.depth)); ends.append((x, oy + ly, g.depth))
            n = nx + ny + 2
            radii += [g.diameter / 2] * n; keys += [g.key] * n; rods += [False] * n; groups += [group] * n
        for c in el.conductors:
            starts.append(c.start); ends.append(c.end); radii.append(c.diameter / 2); keys.append(c.key)
            rods.append(False); groups.append(group)
        for r in el.rods:
            starts.append(r.top); ends.append((r.top[0], r.top[1], r.top[2] + r.length))
            radii.append(r.diameter / 2); keys.append(r.key); rods.append(True); groups.append(group)
    return (np.array(starts, float), np.array(ends, float), np.array(radii, float), keys,
            np.array(rods, bool), np.array(groups, int))


def merge_collinear(start, end, radius, keys, is_rod, group=None) -> tuple[Conductors, list[str]]:
    """Merge conductors of one potential group that lie on one line and overlap, so that no metal is
    counted twice.

    Returns the merged conductors and a warning per merge. The merged conductor takes the larger
    radius of the two.
    """
    group_in = np.zeros(len(start), int) if group is None else np.asarray(group, int)
    direction = end - start
    length = np.linalg.norm(direction, axis=1)
    u = direction / length[:, None]
    # canonical sign: first clearly non-zero component positive
    first = np.argmax(np.abs(u) > 1e-9, axis=1)
    sign = np.sign(u[np.arange(len(u)), first])
    u = u * sign[:, None]
    t0 = np.einsum("ij,ij->i", start, u)
    t1 = np.einsum("ij,ij->i", end, u)
    foot = start - t0[:, None] * u
    lo, hi = np.minimum(t0, t1), np.maximum(t0, t1)
    key = np.column_stack([np.round(np.hstack([u, foot]) / 1e-6).astype(np.int64), group_in])
    _, group = np.unique(key, axis=0, return_inverse=True)
    group = group.ravel()
    out_s, out_e, out_r, out_k, out_rod, out_g, warnings = [], [], [], [], [], [], []
    for g in np.unique(group):
        members = np.flatnonzero(group == g)
        members = members[np.argsort(lo[members], kind="stable")]
        cur = [members[0]]
        cur_lo, cur_hi = lo[members[0]], hi[members[0]]

        def flush(cur, a, b):
            m0 = cur[0]
            out_s.append(foot[m0] + a * u[m0]); out_e.append(foot[m0] + b * u[m0])
            out_r.append(max(radius[i] for i in cur))
            ks = list(dict.fromkeys(keys[i] for i in cur))
            out_k.append(" + ".join(ks)); out_rod.append(bool(all(is_rod[i] for i in cur)))
            out_g.append(int(group_in[m0]))
            if len(cur) > 1:
                shared = sum(hi[i] - lo[i] for i in cur) - (b - a)       # metal counted twice before merging
                warnings.append(f"{' and '.join(ks)} overlap along a shared line ({shared:.2f} m); "
                                "merged into one conductor so no metal is counted twice")

        for i in members[1:]:
            if lo[i] < cur_hi - NODE_TOLERANCE:
                cur.append(i)
                cur_hi = max(cur_hi, hi[i])
            else:
                flush(cur, cur_lo, cur_hi)
                cur, cur_lo, cur_hi = [i], lo[i], hi[i]
        flush(cur, cur_lo, cur_hi)
    # restore the z-down orientation for vertical conductors: start shallower than end
    s, e = np.array(out_s), np.array(out_e)
    swap = s[:, 2] > e[:, 2] + NODE_TOLERANCE
    s[swap], e[swap] = e[swap].copy(), s[swap].copy()
    return Conductors(s, e, np.array(out_r), tuple(out_k), np.array(out_rod, bool), np.array(out_g, int)), warnings


def junction_parameters(c: Conductors) -> tuple[list[np.ndarray], np.ndarray]:
    """Where conductors touch or cross one another.

    Returns
    -------
    cuts : list of ndarray
        For each conductor, the distances along it (m from its start) of points where another
        conductor touches or crosses it.
    touching : ndarray of bool, shape (M, M)
        Which conductors touch.
    contact : ndarray, shape (M, M, 3)
        Closest point on conductor i to conductor j, m (the contact point where they touch).
    """
    a, b = c.start, c.end
    d = b - a
    L = np.linalg.norm(d, axis=1)
    u = d / L[:, None]
    m = len(L)
    # closest approach of segment i (a_i + s u_i, s in [0, L_i]) to segment j, for all pairs
    w = a[:, None, :] - a[None, :, :]                      # a_i - a_j
    uu = np.einsum("ik,jk->ij", u, u)                      # u_i . u_j
    wi = np.einsum("ijk,ik->ij", w, u)                     # w . u_i
    wj = np.einsum("ijk,jk->ij", w, u)                     # w . u_j
    den = 1.0 - uu ** 2
    parallel = den < 1e-12
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.where(parallel, 0.0, (uu * wj - wi) / den)
        t = np.where(parallel, 0.0, (wj - uu * wi) / den)
    s = np.clip(s, 0.0, L[:, None])
    t = np.clip(t, 0.0, L[None, :])
    # re-project once after clipping so that end-point contacts are found exactly
    pj = a[None, :, :] + t[..., None] * u[None, :, :]
    s = np.clip(np.einsum("ijk,ik->ij", pj - a[:, None, :], u), 0.0, L[:, None])
    pi = a[:, None, :] + s[..., None] * u[:, None, :]
    t = np.clip(np.einsum("ijk,jk->ij", pi - a[None, :, :], u), 0.0, L[None, :])
    pj = a[None, :, :] + t[..., None] * u[None, :, :]
    gap = np.linalg.norm(pi - pj, axis=2)
    # metal touches where the axes come closer than the two radii (crossing at slightly different depths, a
    # post's top a fraction of a millimetre from a wire); side-by-side parallel runs are reported apart
    reach = np.maximum(TOUCH_TOLERANCE, c.radius[:, None] + c.radius[None, :])
    touching = gap < np.where(parallel, TOUCH_TOLERANCE, reach)
    np.fill_diagonal(touching, False)
    # parallel (non-collinear after merging) conductors touch only end to end: check end points
    along, _, dist = ends_on_axes(a, b, u, L)
    on_i = dist < 1e-4                                       # (M, M, 2)
    np.fill_diagonal(on_i[..., 0], False); np.fill_diagonal(on_i[..., 1], False)
    touching |= on_i.any(axis=2) | on_i.any(axis=2).T
    # where each touching pair meets: (i, j) → point on i
    contact = pi
    cuts = []
    for i in range(m):
        ci = [s[i, touching[i]]]
        ci.append(along[i][on_i[i]])
        ci.append(t[touching[:, i], i])
        cuts.append(np.concatenate(ci))
    return cuts, touching, contact


def ends_on_axes(a: np.ndarray, b: np.ndarray, u: np.ndarray, L: np.ndarray):
    """For the axis of every conductor i (start a, unit direction u, length L, m) and each end e of every conductor
    j (ends a, b): the distance along i of the axis point nearest that end (clipped to the conductor), the point,
    and the end's distance to it, m; shapes (M, M, 2), (M, M, 2, 3), (M, M, 2)."""
    ends = np.stack([a, b], axis=1)                                      # (M, 2, 3)
    rel = ends[None, :, :, :] - a[:, None, None, :]                      # end e of j relative to a_i
    along = np.clip(np.einsum("ijek,ik->ije", rel, u), 0, L[:, None, None])
    foot = a[:, None, None, :] + along[..., None] * u[:, None, None, :]
    return along, foot, np.linalg.norm(ends[None] - foot, axis=3)


def snap_ends(c: Conductors) -> tuple[Conductors, list[str]]:
    """Ends that lie within the two radii of another (not parallel) conductor's axis but not on it, moved onto
    it (the nearest such point): a conductor that overshoots another by a fraction of its diameter, or stops
    just short of it, touches it, and the cut there leaves no sliver. Moves are at most the sum of the radii;
    returns the conductors and a note listing what moved."""
    a, b = c.start, c.end
    d = b - a
    L = np.linalg.norm(d, axis=1)
    u = d / L[:, None]
    _, foot, dist = ends_on_axes(a, b, u, L)
    foot, dist = np.transpose(foot, (1, 2, 0, 3)), np.transpose(dist, (1, 2, 0))   # [i, e, j]: end e of i on j
    parallel = np.abs(np.einsum("ik,jk->ij", u, u)) > 1 - 1e-9
    reach = c.radius[:, None] + c.radius[None, :]
    near = (dist > NODE_TOLERANCE) & (dist <= reach[:, None, :]) & ~parallel[:, None, :]
    near[np.arange(len(L)), :, np.arange(len(L))] = False
    if not near.any():
        return c, []
    start, end = a.copy(), b.copy()
    moved = []
    for i, e in zip(*np.nonzero(near.any(axis=2))):
        j = int(np.argmin(np.where(near[i, e], dist[i, e], np.inf)))
        (start if e == 0 else end)[i] = foot[i, e, j]
        moved.append((c.keys[i], c.keys[j], float(dist[i, e, j])))
    keep = np.linalg.norm(end - start, axis=1) > NODE_TOLERANCE
    if not keep.all():
        start, end = np.where(keep[:, None], start, a), np.where(keep[:, None], end, b)
    listed = "; ".join(f"{ki} to {kj} ({g * 1000:.2f} mm)" for ki, kj, g in moved[:4])
    note = (f"{len(moved)} conductor end{'s' if len(moved) > 1 else ''} within the radii of another conductor moved "
            f"onto it, so that they touch and leave no piece thinner than the wire ({listed}"
            f"{' ...' if len(moved) > 4 else ''})")
    return Conductors(start, end, c.radius, c.keys, c.is_rod, c.group), [note]


def close_parallel_pairs(c: Conductors) -> list[tuple[int, int, float]]:
    """Parallel conductors that run side by side closer than the sum of their radii (their metal
    overlaps), as (i, j, gap in m). The thin-wire model treats them as two separate wires."""
    a, b = c.start, c.end
    L = c.length
    u = (b - a) / L[:, None]
    dot = np.abs(u @ u.T)
    w = a[None, :, :] - a[:, None, :]                        # a_j − a_i
    along = np.einsum("ijk,ik->ij", w, u)
    perp = np.linalg.norm(w - along[..., None] * u[:, None, :], axis=2)
    tj = along + np.einsum("ijk,ik->ij", (b - a)[None, :, :], u)      # b_j along u_i
    lo, hi = np.minimum(along, tj), np.maximum(along, tj)
    overlap = np.minimum(hi, L[:, None]) - np.maximum(lo, 0.0)
    close = (dot > 1 - 1e-9) & (perp > NODE_TOLERANCE) & (perp < c.radius[:, None] + c.radius[None, :]) & \
        (overlap > 1e-3)
    i, j = np.nonzero(np.triu(close, 1))
    return [(int(p), int(q), float(perp[p, q])) for p, q in zip(i, j)]


def bonded_groups(touching: np.ndarray) -> np.ndarray:
    """Label of the galvanically connected group of each conductor."""
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import connected_components

    _, labels = connected_components(csr_matrix(touching), directed=False)
    return labels


#: Most segments a discretisation may make (estimated from the raw numbers before anything is built).
MAX_SEGMENTS = 2_000_000


def _estimate_size(case: Case) -> None:
    """Refuse, from the case's numbers alone, a layout that would make too many conductors or segments."""
    systems = [case.electrodes] + list(case.separate_electrodes)
    lines = sum(g.meshes[0] + g.meshes[1] + 2 for e in systems for g in e.grids) + \
        sum(len(e.conductors) + len(e.rods) for e in systems)
    if lines > MAX_CONDUCTORS:
        raise ModelTooLargeError(
            f"{case.source}: the electrodes make {lines:,} straight conductors (grid lines, conductors and rods), "
            f"more than {MAX_CONDUCTORS:,}; check the grids' meshes (a mesh count, not a spacing in mm?)")
    h = case.discretization.max_segment
    length = sum(g.size[0] * (g.meshes[1] + 1) + g.size[1] * (g.meshes[0] + 1) for e in systems for g in e.grids) + \
        sum(math.dist(c.start, c.end) for e in systems for c in e.conductors) + \
        sum(r.length for e in systems for r in e.rods)
    estimate = length / h + 2 * lines
    if estimate > MAX_SEGMENTS:
        raise ModelTooLargeError(
            f"{case.source}: discretization.max_segment = {h:g} m would cut {length:,.0f} m of electrode into about "
            f"{estimate:,.0f} segments (at most {MAX_SEGMENTS:,}); use max_segment of at least "
            f"{length / MAX_SEGMENTS:.2g} m")


def _off_interfaces(lines, soil) -> tuple[tuple, list[str]]:
    """Horizontal conductors lying on a soil-layer interface (within their radius) are moved to lie one
    radius inside the more resistive of the two layers, so that each lies in one layer (on the interface
    its own image through it would coincide with it). The shift is at most two radii (a few mm); the more
    resistive side gives the higher Rg and GPR (the conservative choice)."""
    start, end, radius, keys, is_rod, group = lines
    interfaces = soil.interface_depths
    if not len(interfaces):
        return lines, []
    start, end = start.copy(), end.copy()
    flat = np.abs(start[:, 2] - end[:, 2]) < NODE_TOLERANCE
    notes = []
    for i, depth in enumerate(interfaces):
        near = flat & (np.abs(start[:, 2] - depth) < radius)
        if near.any():
            up = soil.layers[i].resistivity >= soil.layers[i + 1].resistivity
            target = depth - radius[near] if up else depth + radius[near]
            shift = target - start[near, 2]
            start[near, 2] += shift
            end[near, 2] += shift
            # rods and other conductors that started on the moved ones keep touching them
            r_max = float(radius[near].max())
            tops = ~flat & (np.abs(start[:, 2] - depth) <= r_max)
            start[tops, 2] = depth - r_max if up else depth + r_max
            names = list(dict.fromkeys(keys[k] for k in np.flatnonzero(near)))
            notes.append(f"{', '.join(names[:3])}{' ...' if len(names) > 3 else ''} lie(s) on the soil-layer interface "
                         f"at {depth:g} m; taken {np.abs(shift).max() * 1000:.1f} mm {'higher' if up else 'lower'}, "
                         f"just inside the more resistive layer ({soil.layers[i if up else i + 1].resistivity:g} Ω·m: "
                         "the higher Rg and GPR), so that each conductor lies in one layer")
    return (start, end, radius, keys, is_rod, group), notes


def _refuse_contacts(case: Case, c: Conductors, touching: np.ndarray, contact: np.ndarray) -> None:
    """Metal of different potential groups (main system, each floating or remote electrode) must not touch."""
    cross = touching & (c.group[:, None] != c.group[None, :])
    if not cross.any():
        return
    i, j = map(int, np.argwhere(cross)[0])
    if c.group[i] == 0 or (c.group[j] != 0 and c.group[j] < c.group[i]):
        i, j = j, i                                        # name the separate electrode
    e = case.separate_electrodes[c.group[i] - 1]
    other = "the main system" if c.group[j] == 0 else f"separate electrode '{case.separate_electrodes[c.group[j] - 1].name}'"
    x, y, z = contact[i, j]
    raise CaseError(case.source, e.line, e.key,
                    f"'{e.name}' ({c.keys[i]}) touches {other} ({c.keys[j]}) at ({x:.2f}, {y:.2f}, {z:.2f}) m; "
                    "metal that touches is one electrode: mark it bonded or move it")


#: An injection point counts as on the metal within this distance of a conductor's axis, m.
INJECTION_TOLERANCE = 0.05


def _injection_place(case: Case, c: Conductors, inj) -> tuple[int, float]:
    """The main-system conductor an injection point lies on and the distance along it (m); refuses a point
    off the metal with the nearest point of the metal and its distance."""
    p = np.asarray(inj.point, float)
    k = len(p)                                   # 2: a point in plan, the metal's depth taken there
    d = c.end - c.start
    L = c.length
    along = np.einsum("ij,ij->i", p - c.start[:, :k], d[:, :k])
    plan = np.einsum("ij,ij->i", d[:, :k], d[:, :k])
    t = np.clip(np.where(plan > 0, along / np.where(plan > 0, plan, 1.0), 0.0), 0.0, 1.0)
    foot = c.start + t[:, None] * d
    gap = np.where(c.group == 0, np.linalg.norm(foot[:, :k] - p, axis=1), np.inf)
    if k == 2:                                   # of the metal under the point, the shallowest (the top)
        near = gap <= INJECTION_TOLERANCE
        gap = np.where(near, foot[:, 2], gap + 1e6) if near.any() else gap
    i = int(np.argmin(gap))
    miss = float(np.linalg.norm(foot[i, :k] - p))
    if not miss <= INJECTION_TOLERANCE:
        x, y, z = foot[i]
        where = ", ".join(f"{v:g}" for v in p)
        raise CaseError(case.source, inj.line, inj.key,
                        f"({where}) m is not on the main system's metal: the nearest point is "
                        f"({x:.2f}, {y:.2f}, {z:.2f}) m on {c.keys[i]}, {miss:.2f} m away; give a point on a "
                        "conductor or rod (within 0.05 m of its axis; [x, y] takes the metal's depth there)")
    return i, float(t[i] * L[i])


def segment(case: Case) -> Segments:
    """Discretise the case's electrodes into straight segments.

    Cuts every conductor at junctions and crossings with other conductors, at soil-layer
    interfaces, and into equal parts no longer than ``case.discretization.max_segment``.
    """
    _estimate_size(case)
    lines = electrode_lines(case)
    if len(lines[0]) > MAX_CONDUCTORS:
        raise ModelTooLargeError(
            f"{case.source}: the electrodes make {len(lines[0]):,} straight conductors (grid lines, conductors and "
            f"rods), more than {MAX_CONDUCTORS:,}; check the grids' meshes (a mesh count, not a spacing in mm?)")
    lines, moved = _off_interfaces(lines, case.soil)
    conductors, warnings = merge_collinear(*lines)
    conductors, snapped = snap_ends(conductors)
    warnings = moved + warnings + snapped
    cuts, touching, contact = junction_parameters(conductors)
    _refuse_contacts(case, conductors, touching, contact)
    for i, j, gap in close_parallel_pairs(conductors)[:5]:
        warnings.append(f"{conductors.keys[i]} and {conductors.keys[j]} run side by side {gap * 1000:.1f} mm apart, "
                        "closer than their diameters: the thin-wire model treats them as two wires; merge them "
                        "into one conductor if they are one")
    for g in np.unique(conductors.group):
        members = np.flatnonzero(conductors.group == g)
        groups = bonded_groups(touching[np.ix_(members, members)])
        if len(np.unique(groups)) > 1:
            sizes = np.bincount(groups)
            loose = [conductors.keys[members[i]] for i in range(len(groups)) if sizes[groups[i]] < sizes.max()]
            loose = list(dict.fromkeys(loose))
            what = "electrode groups" if g == 0 else f"pieces of separate electrode " \
                f"'{case.separate_electrodes[g - 1].name}'"
            warnings.append(f"{len(np.unique(groups))} {what} do not touch each other "
                            f"({', '.join(loose[:4])}{' ...' if len(loose) > 4 else ''}); they are taken as "
                            "bonded by above-ground leads into one equipotential system")
    for inj in case.fault.injection:
        i, t = _injection_place(case, conductors, inj)
        cuts[i] = np.append(cuts[i], t)
    interfaces = np.array(case.soil.interface_depths)
    max_seg = case.discretization.max_segment
    a, b = conductors.start, conductors.end
    L = conductors.length
    starts, ends, owner = [], [], []
    merged, graded = [], 0
    exact_nodes = case.electrodes.conductor_impedance        # the metal network needs every junction node
    for i in range(len(L)):
        za, zb = a[i, 2], b[i, 2]
        extra = []
        if abs(zb - za) > NODE_TOLERANCE and len(interfaces):
            f = (interfaces - za) / (zb - za)
            extra = f[(f > 0) & (f < 1)] * L[i]
        p = np.sort(np.concatenate([[0.0, L[i]], cuts[i], extra]))
        p = p[np.concatenate([[True], np.diff(p) > 1e-4])]
        p[-1] = L[i]
        if len(p) < 2:                    # a piece shorter than the node tolerance stays one segment
            p = np.array([0.0, L[i]])
        if len(p) > 2 and p[-1] - p[-2] <= 1e-4:
            p = np.delete(p, -2)
        shortest = max(MIN_PIECE, 2 * conductors.radius[i])
        if len(p) > 2 and np.diff(p).min() < shortest and not exact_nodes:
            p, tiny = _merge_short_pieces(p, shortest)
            merged.append((conductors.keys[i], tiny))
        pieces = np.diff(p)
        n = np.maximum(1, np.ceil(pieces / max_seg - 1e-9).astype(int))
        fr = np.concatenate([p[k] + pieces[k] * np.arange(n[k] + 1) / n[k] for k in range(len(n))])
        fr = fr[np.concatenate([[True], np.diff(fr) > 1e-12])] / L[i]
        if conductors.is_rod[i] and case.discretization.refine_rod_ends:
            before = len(fr)
            fr = _graded_ends(fr, ROD_END_GRADING, shortest / L[i])
            graded += len(fr) - before
        pts = a[i] + fr[:, None] * (b[i] - a[i])
        starts.append(pts[:-1]); ends.append(pts[1:]); owner.append(np.full(len(pts) - 1, i))
    owner = np.concatenate(owner)
    if merged:
        warnings.append(f"{len(merged)} conductor{'s' if len(merged) > 1 else ''} would have been cut into pieces "
                        f"shorter than their diameter (or {MIN_PIECE * 1000:g} mm) at junctions; those pieces are "
                        "merged into their neighbours (" + "; ".join(f"{k}: {t * 1000:.2f} mm" for k, t in merged[:4])
                        + (" ..." if len(merged) > 4 else "") + ")")
    return Segments(np.vstack(starts), np.vstack(ends), conductors.radius[owner], owner, conductors,
                    tuple(warnings), graded)


def _graded_ends(fr: np.ndarray, grading: tuple[float, ...], shortest: float) -> np.ndarray:
    """Fractions along a rod with its end segments cut again at the given fractions of their length from the
    end (e.g. (0.25, 0.5): pieces of a quarter, a quarter and a half), leaving no piece shorter than
    ``shortest`` (a fraction of the rod)."""
    first, last = fr[1] - fr[0], fr[-1] - fr[-2]
    extra = [fr[0] + g * first for g in grading] + [fr[-1] - g * last for g in grading]
    out = np.unique(np.concatenate([fr, [x for x in extra if fr[0] < x < fr[-1]]]))
    keep = np.concatenate([[True], np.diff(out) >= shortest])
    keep[-1] = True
    out = out[keep]
    if len(out) > 2 and out[-1] - out[-2] < shortest:
        out = np.delete(out, -2)
    return out


def _merge_short_pieces(p: np.ndarray, shortest: float) -> tuple[np.ndarray, float]:
    """Cut positions (m, sorted, with both ends) without the cuts that leave pieces shorter than ``shortest``:
    a short piece joins the piece before it (the last one the piece after it). Returns the positions and the
    shortest piece removed, m."""
    tiny = float(np.diff(p).min())
    kept = [p[0]]
    for x in p[1:-1]:
        if x - kept[-1] >= shortest:
            kept.append(x)
    if len(kept) > 1 and p[-1] - kept[-1] < shortest:
        kept.pop()
    return np.array(kept + [p[-1]]), tiny
