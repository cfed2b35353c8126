"""The nodal system of the estimate by entry, and its condensation (netgen.periodic.estimator).

A network's modified-nodal-analysis matrix (C.-W. Ho, A. E. Ruehli and P. A. Brennan, IEEE Trans.
Circuits and Systems, 1975) is sparse: a few entries per element in an n x n matrix, the same in
every frequency bin. Here it is kept by entry, ``Entries``: one row of values over the bins per
non-zero (row, column) of the matrix. Two things are done with it, each once per structure and
replayed for the next matrix of the same structure (the points of a tolerance sweep or a tuning
run change values only):

* assembly (:class:`Stamps`): each element's stamp is a sum of terms (a constant, a value times
  s, a value over s, or values over the bins) put with a sign into entries; where they go is
  compiled into a layout once, and a new set of values becomes the entries in a few array
  operations;
* condensation (:func:`solve_condensed`): the voltage sources are eliminated with one of their
  nodes, then the nodes that couple to at most two other nodes and carry no right-hand side (the
  inner nodes of loss ladders and series chains) by Gaussian elimination, level by level (the
  nodes of a level are not coupled to each other, so they are eliminated together), and the rest
  by one batched dense solve.

Both are exact rearrangements of the same linear algebra; tests/test_estimator.py compares every
unknown with LAPACK's partial-pivoting solve of the whole system.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

__all__ = ["CONDENSE_PIVOT_MIN", "Entries", "Stamps", "TERM_BINS", "TERM_CONST", "TERM_OVER_S", "TERM_TIMES_S",
           "remember", "solve_condensed"]

#: the kinds of a stamp's term: a constant, a value times s, a value over s, values over the bins
TERM_CONST, TERM_TIMES_S, TERM_OVER_S, TERM_BINS = 0, 1, 2, 3

#: a node is condensed only if its pivot is at least this fraction of its largest coupling at every bin
CONDENSE_PIVOT_MIN = 1e-6

#: rows of ``Entries.values`` that are not entries: one always zero (read for an absent entry), one
#: scratch (written for an absent neighbour)
ZERO_ROW, SCRATCH_ROW = -2, -1


def remember(cache: dict, key, value, most: int):
    """Store ``value`` under ``key`` in a cache of at most ``most`` entries (the oldest go first)."""
    cache[key] = value
    while len(cache) > most:
        cache.pop(next(iter(cache)))
    return value


# ---------------------------------------------------------------- the matrix by entry

class Entries:
    """The non-zero entries of a matrix over K bins.

    ``index`` maps (row, column) to a row of ``values`` (complex, (rows, K)); the last two rows
    are ZERO_ROW and SCRATCH_ROW. ``structure`` is equal for matrices whose entries sit in the
    same rows (the key of the condensation's replay). New entries (fill-in) get rows at the end;
    the index is copied before its first change (it may be a layout's).
    """

    __slots__ = ("index", "values", "structure", "_own", "_used", "_rc")

    def __init__(self, index: dict, values: np.ndarray, structure, rc: np.ndarray | None = None):
        self.index, self.values, self.structure = index, values, structure
        self._own = False
        self._used = len(index)
        self._rc = rc  # (row, column) of the rows 0.. of ``index`` as made (a layout's, kept with it)

    @classmethod
    def from_dict(cls, Y: dict, K: int) -> Entries:
        """Entries of ``{(row, column): value over the bins (K,) or a constant}``."""
        keys = sorted(Y)
        values = np.zeros((len(keys) + 2, K), complex)
        for q, k in enumerate(keys):
            values[q] = Y[k]
        return cls({k: q for q, k in enumerate(keys)}, values, tuple(keys))

    def get(self, r: int, c: int) -> int:
        """The row of entry (r, c), or ZERO_ROW if it is absent."""
        return self.index.get((r, c), ZERO_ROW)

    def slot(self, r: int, c: int, scratch: bool = False) -> int:
        """The row of entry (r, c), made (zero) if it is absent; SCRATCH_ROW for an absent
        neighbour (``scratch``)."""
        if scratch:
            return SCRATCH_ROW
        q = self.index.get((r, c))
        if q is not None:
            return q
        if not self._own:
            self.index, self._own, self._rc = dict(self.index), True, None
        q = self._used
        if q + 2 >= self.values.shape[0]:  # grow, the last two rows zero again
            grown = np.zeros((q + 2 + 16, self.values.shape[1]), complex)
            grown[:q] = self.values[:q]
            self.values = grown
        self.index[(r, c)] = q
        self._used = q + 1
        return q

    def adopt(self, index: dict) -> None:
        """Take ``index`` (a superset of this one's, from an earlier matrix of the same structure:
        its extra entries are fill-in, zero until written) as this matrix's index."""
        if self.values.shape[0] < len(index) + 2:
            grown = np.zeros((len(index) + 2, self.values.shape[1]), complex)
            grown[:self._used] = self.values[:self._used]
            self.values = grown
        self.index, self._own, self._used, self._rc = index, False, len(index), None

    @property
    def rows_used(self) -> int:
        return self._used

    def dense(self, n: int) -> np.ndarray:
        """The matrix, (K, n, n)."""
        A = np.zeros((self.values.shape[1], n, n), complex)
        if self._rc is not None:  # the layout's own index: rows 0..E-1 in its order
            A[:, self._rc[:, 0], self._rc[:, 1]] = self.values[:len(self._rc)].T
        elif self.index:
            rc = np.array(list(self.index), dtype=int)
            A[:, rc[:, 0], rc[:, 1]] = self.values[list(self.index.values())].T
        return A


class Stamps:
    """One assembly's terms and where they go (the element stamps of estimator._Net).

    An element registers each of its terms once (:meth:`term`) and puts it, with a sign, into the
    entries its stamp touches (:meth:`put`); :meth:`entries` evaluates the matrix. Where the terms
    go depends on the network's structure only (``structure``: hashable, equal for networks whose
    stamps put the same terms in the same entries): it is compiled once into a :class:`_Layout`
    and afterwards only the terms' values are collected.
    """

    __slots__ = ("terms", "where", "one", "structure", "layout")

    def __init__(self, structure):
        self.structure = structure
        self.layout = _LAYOUTS.get(structure)
        self.terms: tuple[list, list, list, list] = ([], [], [], [])
        self.where: list[tuple] | None = [] if self.layout is None else None
        self.one = self.term(TERM_CONST, 1.0)

    def term(self, kind: int, value) -> tuple[int, int]:
        """Register a term of ``kind`` (TERM_*): a number, or values over the bins for TERM_BINS."""
        t = self.terms[kind]
        t.append(value)
        return kind, len(t) - 1

    def put(self, r: int | None, c: int | None, term: tuple[int, int], sign: float = 1.0) -> None:
        """Add ``sign * term`` to entry (r, c) (nothing where r or c is ground, None)."""
        if self.where is not None and r is not None and c is not None:
            self.where.append((r, c, term[0], term[1], sign))

    def entries(self, s: np.ndarray) -> Entries:
        """The entries for the Laplace variables ``s`` (K,) of the bins."""
        layout = self.layout
        if layout is None:
            layout = remember(_LAYOUTS, self.structure, _Layout(self.where), _LAYOUTS_MAX)
        return layout.evaluate(self.terms, s)


_SERIALS = itertools.count(1)
#: assembly layouts by structure (a sweep's points share one)
_LAYOUTS: dict = {}
_LAYOUTS_MAX = 32
#: rows (entries and fill-in) the condensation of each layout needed, by its serial: allocated up front
_LAYOUT_ROWS: dict[int, int] = {}


class _Layout:
    """Where the terms of one structure go: per kind the entries it touches and a dense matrix of
    signs (those entries x the kind's terms)."""

    def __init__(self, where: list[tuple]):
        index: dict[tuple[int, int], int] = {}
        for r, c, *_ in where:
            index.setdefault((r, c), len(index))
        self.index = index
        self.rc = np.array(list(index), dtype=int).reshape(-1, 2)
        self.serial = next(_SERIALS)
        E = len(index)
        #: per kind: (rows touched, signs (rows, terms)) or None
        self.maps: list[tuple[np.ndarray, np.ndarray] | None] = []
        for kind in (TERM_CONST, TERM_TIMES_S, TERM_OVER_S, TERM_BINS):
            mine = [(index[(r, c)], t, sign) for r, c, k, t, sign in where if k == kind]
            if not mine:
                self.maps.append(None)
                continue
            A = np.zeros((E, 1 + max(t for _, t, _ in mine)))
            for e, t, sign in mine:
                A[e, t] += sign
            rows = np.flatnonzero(np.any(A != 0, axis=1))
            self.maps.append((rows, A[rows]))

    def evaluate(self, terms, s: np.ndarray) -> Entries:
        E, K = len(self.index), len(s)
        V = np.zeros((max(_LAYOUT_ROWS.get(self.serial, 0), E) + 2, K), complex)
        for kind, m in enumerate(self.maps):
            if m is None:
                continue
            rows, A = m
            vals = terms[kind][:A.shape[1]]
            if kind == TERM_BINS:
                V[rows] += A @ np.array(vals, complex).reshape(A.shape[1], K)
            elif kind == TERM_CONST:  # the first kind: its rows are still zero
                V[rows] = (A @ np.asarray(vals, complex))[:, None]
            else:
                V[rows] += (A @ np.asarray(vals, complex))[:, None] * (s if kind == TERM_TIMES_S else 1.0 / s)
        return Entries(self.index, V, self.serial, self.rc)


# ---------------------------------------------------------------- the condensation

@dataclass
class _SourceStep:
    """The elimination of one voltage source and one of its nodes (see :func:`_source_step`)."""

    p: int
    e: int
    o: int | None
    sigma: float
    c_e: float
    col_from: np.ndarray  # rows of the entries (r, e)
    col_to: np.ndarray | None  # rows of (r, o), None when o is ground
    col_rows: np.ndarray  # the r of those entries
    row_from: np.ndarray  # rows of (e, c), c != p (read after the column moved)
    row_cols: np.ndarray  # the c
    row_to: np.ndarray | None  # rows of (o, c)


@dataclass
class _Level:
    """Nodes eliminated together: no two are coupled (their Schur complements commute)."""

    nodes: np.ndarray  # (m,)
    nbr: np.ndarray  # (m, 2) neighbours, n (the padded zero column of X) where there is none
    ii: np.ndarray  # (m,) rows of the pivots
    ij: np.ndarray  # (m, 2) rows of (i, j) (ZERO_ROW where absent)
    ji: np.ndarray  # (m, 2) rows of (j, i)
    jk: list  # [(positions in the (m*4,) updates, rows of (j, k))]: batches without repeated rows


@dataclass
class _Plan:
    levels: list
    keep: np.ndarray
    dense_rows: np.ndarray
    dense_at: tuple  # (row positions, column positions) in the kept unknowns
    index: dict  # the entries' index after every fill-in (for a search that takes over)


#: source eliminations by (structure, n, sources): (steps, the index after them); condensation
#: plans by that and the free nodes
_SOURCE_PLANS: dict[tuple, tuple] = {}
_PLANS: dict[tuple, _Plan] = {}
_PLANS_MAX = 32


def solve_condensed(Y: Entries, R: np.ndarray, nn: int, vsrc: list | None = None) -> np.ndarray:
    """X with Y X = R per bin (Y consumed; R (K, n, c), overwritten), after the elimination of the
    voltage sources ``vsrc`` ((branch column, node a, node b), :func:`_source_step`) and Gaussian
    elimination of the nodes that couple to at most two other nodes and carry no right-hand side
    (the inner nodes of loss ladders and series chains); the rest by one batched dense solve.

    The elimination of such a node is exact (a Schur complement of one unknown: the series
    combination of its two branches, Y_jk -= Y_ji Y_ik / Y_ii) and creates at most one new
    coupling, so a chain collapses node by node (minimum-degree ordering restricted to degree
    <= 2; Tinney & Walker, Proc. IEEE 1967); nodes not coupled to each other are eliminated in
    one step (a level; their updates only add up). Only node unknowns (index < ``nn``) are
    condensed, and only where the pivot |Y_ii| is at least CONDENSE_PIVOT_MIN of the node's
    couplings at every bin (a lossless series resonator's inner node near its resonance keeps the
    dense solve's partial pivoting). The condensed unknowns are recovered afterwards in reverse.

    The plan (levels, dense part) depends on the structure only (and on the pivot test): it is
    found once per structure and replayed for the next matrix of the same structure, each
    level's pivots tested again; where a level fails its test, the search continues from there
    as on a new structure (and the stored plan stays).
    """
    K, n, _ = R.shape
    alive = np.ones(n, bool)
    vkey = (Y.structure, n, tuple(vsrc or ()))
    known = _SOURCE_PLANS.get(vkey)
    if known is None:
        steps = _source_plan(Y, vsrc or ())
        known = remember(_SOURCE_PLANS, vkey, (steps, dict(Y.index)), _PLANS_MAX)
    else:
        Y.adopt(known[1])
    sources = known[0]
    shorted = []
    for st in sources:
        shorted.append(_run_source(st, Y.values, R))
        alive[st.p] = alive[st.e] = False
    free = ~R.view(float).reshape(K, -1).any(axis=0).reshape(n, -1).any(axis=1)  # no right-hand side in any bin
    key = (vkey, nn, free.tobytes())
    plan = _PLANS.get(key)
    done: list = []
    complete = plan is not None
    if plan is not None:
        Y.adopt(plan.index)
        for lv in plan.levels:
            out = _run_level(lv, Y.values)
            if out is None:
                complete = False  # this matrix's pivot is too small: search on from here
                break
            done.append((lv, *out))
            alive[lv.nodes] = False
    if complete:
        keep, rows, (dr, dc) = plan.keep, plan.dense_rows, plan.dense_at
    else:
        _search(Y, alive, free, nn, n, done)
        keep = np.flatnonzero(alive)
        at = np.full(n, -1)
        at[keep] = np.arange(len(keep))
        live = [(q, at[r], at[c]) for (r, c), q in Y.index.items() if alive[r] and alive[c]]
        rows, dr, dc = (np.array(x, dtype=int) for x in (zip(*live) if live else ((), (), ())))
        if plan is None:
            remember(_LAYOUT_ROWS, Y.structure, max(_LAYOUT_ROWS.get(Y.structure, 0), Y.rows_used), _PLANS_MAX)
            remember(_PLANS, key, _Plan([x[0] for x in done], keep, rows, (dr, dc), Y.index), _PLANS_MAX)
    A = np.zeros((K, len(keep), len(keep)), complex)
    A[:, dr, dc] = Y.values[rows].T
    X = np.zeros((K, n + 1, R.shape[2]), complex)  # column n: zero, the absent neighbour
    X[:, keep] = np.linalg.solve(A, R[:, keep])
    for lv, row, piv in reversed(done):
        acc = np.einsum("mqk,kmqc->kmc", row, X[:, lv.nbr])
        X[:, lv.nodes] = -acc / piv.T[:, :, None]
    for st, (r_p, row_e, r_e) in zip(reversed(sources), reversed(shorted)):
        X[:, st.e] = st.sigma * r_p + (X[:, st.o] if st.o is not None else 0.0)
        acc = r_e - np.einsum("qk,kqc->kc", row_e, X[:, st.row_cols])
        X[:, st.p] = acc / st.c_e
    return X[:, :n]


def _source_plan(Y: Entries, vsrc) -> list[_SourceStep]:
    """The eliminations of the voltage sources ``vsrc`` (structure only: no pivot is tested)."""
    rows: dict[int, set[int]] = {}
    cols: dict[int, set[int]] = {}
    for r, c in Y.index:
        rows.setdefault(r, set()).add(c)
        cols.setdefault(c, set()).add(r)
    merged: dict = {}  # eliminated node -> the node its voltage went to (None: ground)

    def find(x):
        while x in merged:
            x = merged[x]
        return x

    steps = []
    for p, a, b in vsrc:
        a, b = find(a), find(b)
        if a == b:  # a loop of voltage sources: left to the dense solve (which finds it singular)
            continue
        st = _source_step(Y, p, a, b, rows, cols)
        merged[st.e] = st.o
        steps.append(st)
    return steps


def _source_step(Y: Entries, p: int, a: int | None, b: int | None, rows: dict, cols: dict) -> _SourceStep:
    """Eliminate a voltage source (branch unknown ``p`` between nodes ``a`` and ``b``, row
    ``v_a - v_b = R_p``) and one of its nodes ``e`` (``rows``/``cols``: the columns of each row
    and the rows of each column of Y's live entries, kept up to date).

    ``v_e = v_o + sigma R_p`` (o the other node, or ground) goes into every column of e; the
    source current, which appears only in the KCL rows of a and b, leaves with row e: row e is
    added to row o (the current's coefficients there are opposite), and afterwards the current is
    row e's residual. Exact (a 2 x 2 pivot on the source's unit entries; the classic merging of
    the nodes of a voltage source, e.g. J. Vlach and K. Singhal, "Computer Methods for Circuit
    Analysis and Design", recalled from memory); 0 V current senses and the supply (0 V off DC)
    make most of them.
    """
    def link(r, c):
        rows.setdefault(r, set()).add(c)
        cols.setdefault(c, set()).add(r)

    def unlink(r, c):
        rows[r].discard(c)
        cols[c].discard(r)

    e, o, sigma = (b, a, -1.0) if b is not None else (a, None, 1.0)
    c_e = -1.0 if e == b else 1.0  # the current's coefficient in row e (branch_kcl: +1 at a, -1 at b)
    col_r = sorted(cols.get(e, ()))
    col_from = [Y.get(r, e) for r in col_r]
    col_to = None
    for r in col_r:
        unlink(r, e)
    if o is not None:
        col_to = [Y.slot(r, o) for r in col_r]
        for r in col_r:
            link(r, o)
    for c in list(rows.get(p, ())):
        unlink(p, c)
    row_c = sorted(c for c in rows.get(e, ()) if c != p)
    row_from = [Y.get(e, c) for c in row_c]
    for c in list(rows.get(e, ())):
        unlink(e, c)
    row_to = None
    if o is not None:
        if p in rows.get(o, ()):
            unlink(o, p)
        row_to = [Y.slot(o, c) for c in row_c]
        for c in row_c:
            link(o, c)
    arr = lambda x: None if x is None else np.array(x, dtype=int)  # noqa: E731
    return _SourceStep(p, e, o, sigma, c_e, arr(col_from), arr(col_to), arr(col_r), arr(row_from), arr(row_c),
                       arr(row_to))


def _run_source(st: _SourceStep, V: np.ndarray, R: np.ndarray) -> tuple:
    """One source elimination on the values; returns what the recovery needs (R_p, row e, R_e)."""
    y = V[st.col_from]
    if st.col_to is not None:
        V[st.col_to] += y
    r_p = R[:, st.p].copy()
    R[:, st.col_rows] -= y.T[:, :, None] * (st.sigma * r_p)[:, None, :]
    row_e = V[st.row_from]
    r_e = R[:, st.e].copy()
    if st.o is not None:
        V[st.row_to] += row_e
        R[:, st.o] += r_e
    R[:, st.e] = 0.0
    R[:, st.p] = 0.0
    return r_p, row_e, r_e


def _run_level(lv: _Level, V: np.ndarray):
    """Eliminate a level's nodes from the values if every pivot passes the test: (row, pivot) for
    the recovery, or None (nothing changed)."""
    if not _pivots_pass(lv, V).all():
        return None
    piv = V[lv.ii]
    row = V[lv.ij]
    f = V[lv.ji] / piv[:, None]
    upd = (f[:, :, None] * row[:, None]).reshape(-1, V.shape[1])
    for at, dest in lv.jk:
        V[dest] -= upd[at]
    return row, piv


def _pivots_pass(lv: _Level, V: np.ndarray) -> np.ndarray:
    """Per node of the level: |pivot| >= CONDENSE_PIVOT_MIN x its largest coupling at every bin."""
    return np.all(np.abs(V[lv.ii]) >= CONDENSE_PIVOT_MIN * np.abs(V[lv.ij]).max(axis=1), axis=1)


def _level(Y: Entries, nodes: list[int], adj: list, n: int) -> _Level:
    """The index arrays of eliminating ``nodes`` (not coupled to each other) from Y."""
    nbrs = [sorted(adj[i]) + [None] * (2 - len(adj[i])) for i in nodes]
    ii = [Y.get(i, i) for i in nodes]
    ij = [[ZERO_ROW if j is None else Y.get(i, j) for j in nb] for i, nb in zip(nodes, nbrs)]
    ji = [[ZERO_ROW if j is None else Y.get(j, i) for j in nb] for i, nb in zip(nodes, nbrs)]
    dest = [Y.slot(j, k, scratch=j is None or k is None) for nb in nbrs for j in nb for k in nb]
    batches, seen = [], {}
    for pos, q in enumerate(dest):  # the k-th update of a row goes into batch k (fancy indexing adds once)
        b = seen.get(q, 0) if q != SCRATCH_ROW else 0
        seen[q] = b + 1
        while len(batches) <= b:
            batches.append(([], []))
        batches[b][0].append(pos)
        batches[b][1].append(q)
    arr = np.asarray
    return _Level(arr(nodes, dtype=int), arr([[n if j is None else j for j in nb] for nb in nbrs], dtype=int),
                  arr(ii, dtype=int), arr(ij, dtype=int), arr(ji, dtype=int),
                  [(arr(a, dtype=int), arr(b, dtype=int)) for a, b in batches])


def _search(Y: Entries, alive: np.ndarray, free: np.ndarray, nn: int, n: int, done: list) -> None:
    """Eliminate, level after level, free nodes coupled to at most two other live unknowns (all
    of them nodes) whose pivot passes the test (no two of a level coupled), until none is left."""
    adj: list[set[int]] = [set() for _ in range(n)]
    for r, c in Y.index:
        if r != c and alive[r] and alive[c]:
            adj[r].add(c)
            adj[c].add(r)
    while True:
        picked, blocked = [], set()
        for i in range(nn):
            if not (alive[i] and free[i]) or len(adj[i]) > 2 or i in blocked or any(j >= nn for j in adj[i]):
                continue
            picked.append(i)
            blocked.add(i)
            blocked.update(adj[i])
        if not picked:
            return
        lv = _level(Y, picked, adj, n)
        ok = _pivots_pass(lv, Y.values)
        if not ok.any():
            return
        if not ok.all():
            lv = _level(Y, [i for i, good in zip(picked, ok) if good], adj, n)
        out = _run_level(lv, Y.values)
        done.append((lv, *out))
        for i in lv.nodes.tolist():
            nbr = adj[i]
            for j in nbr:
                adj[j].discard(i)
                adj[j].update(x for x in nbr if x != j)
            adj[i] = set()
            alive[i] = False
