"""Isotonic regression by pool-adjacent-violators, and the permutahedron projection built on it.

Projection onto the permutahedron P(w) = conv{permutations of w} reduces to
one sort and one isotonic regression: with y sorted in decreasing order (the
permutation sigma) and w sorted in decreasing order, the projection is
x_sigma = y_sigma - v where v is the non-increasing sequence closest to
y_sigma - w. (The KKT conditions of min ||x - y||^2 under the majorization
inequalities sum_{i<=k} x_sigma(i) <= sum_{i<=k} w_i, with equality at k = n,
are exactly those of that isotonic regression.) O(n log n) for the sort, O(n)
for the pooling.

All functions are pure; the compiled ones are cached on disk by numba.
"""
from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, nogil=True)
def pav_decreasing(s, out):
    """Write into ``out`` the non-increasing v minimizing ||v - s||^2 (unweighted), O(n).

    Pool-adjacent-violators with a stack of blocks (sum, count): a new value
    starts a block; while the previous block's mean is below the last block's
    mean, the two merge. Returns the number of blocks.
    """
    n = s.size
    sums = np.empty(n)
    cnts = np.empty(n, np.int64)
    nb = 0
    for i in range(n):
        sums[nb] = s[i]
        cnts[nb] = 1
        nb += 1
        # previous mean < last mean  <=>  sums[p] * cnts[l] < sums[l] * cnts[p]
        while nb > 1 and sums[nb - 2] * cnts[nb - 1] < sums[nb - 1] * cnts[nb - 2]:
            sums[nb - 2] += sums[nb - 1]
            cnts[nb - 2] += cnts[nb - 1]
            nb -= 1
    k = 0
    for b in range(nb):
        v = sums[b] / cnts[b]
        for _ in range(cnts[b]):
            out[k] = v
            k += 1
    return nb


@njit(cache=True, nogil=True)
def _permutahedron_rows(Y, order, wdesc, out):
    """Rows of Y onto P(w) given each row's decreasing order: x_sigma = y_sigma - PAV(y_sigma - w).

    One gather (y in decreasing order), the pooling on y_sigma - w, and one scatter
    that writes y_sigma - (block mean) straight to the answer.

    Exact at every magnitude: every coordinate of the answer lies in [w_min, w_max],
    and inside a pooled block x_i - x_{i+1} = y_i - y_{i+1}, so no block spans a gap
    of y larger than spread = w_max - w_min. The sorted y is cut into clusters at such
    gaps (a barrier for the pooling) and each cluster is pooled relative to its first
    value: x_i = (y_i - ref) - mean_block((y - ref) - w), where y_i - ref is exact
    (Sterbenz) or at the cluster's own scale. No cancellation at |y| = 1e17 (plain
    y - w would lose w entirely), no overflow of y - w near 1e308. Exact up to
    rounding for finite |y| <= 1e300.
    """
    b, n = Y.shape
    ys = np.empty(n)
    refs = np.empty(n)
    sums = np.empty(n)
    cnts = np.empty(n)
    starts = np.empty(n, np.int64)
    for r in range(b):
        _pav_row(Y[r], order[r], wdesc, out[r], ys, refs, sums, cnts, starts)


@njit(cache=True, nogil=True)
def _pav_row(y, order, wdesc, out, ys, refs, sums, cnts, starts):
    """One row of :func:`_permutahedron_rows` with its work buffers given (counts as floats: exact).

    Pool-adjacent-violators with the top block of the stack held in locals (ts, tc): each new value
    z is compared with the top first, in registers, and either pooled into it (then the top is
    compared with the stored blocks below, ``sums``/``cnts``) or the top is stored and z becomes the
    top, so the common step stores nothing it reads back at once. Each block keeps the reference
    value of its cluster in ``refs`` (blocks never cross a cluster's edge). The answer is written by
    one walk whose block index advances by the 0/1 flags of ``starts`` (an integer chain, no
    branch). The same comparisons and the same sums (a + b = b + a) as
    :func:`_pav_row_reference`: the same bits."""
    n = y.size
    if n == 0:
        return
    spread2 = 2.0 * (wdesc[0] - wdesc[n - 1])
    for i in range(n):
        ys[i] = y[order[i]]
        starts[i] = 0
    nb = 0                        # blocks stored below the top
    floor = 0
    ref = ys[0]
    ts = (ys[0] - ref) - wdesc[0]
    tc = 1.0
    for i in range(1, n):
        yi = ys[i]
        if ys[i - 1] - yi > spread2:
            sums[nb] = ts         # a new cluster: no pool crosses this gap
            cnts[nb] = tc
            refs[nb] = ref
            nb += 1
            floor = nb
            ref = yi
            ts = (yi - ref) - wdesc[i]
            tc = 1.0
            continue
        z = (yi - ref) - wdesc[i]
        if ts < z * tc:           # the top's mean is below z: pool z into the top
            ts = z + ts
            tc = 1.0 + tc
            while nb > floor and sums[nb - 1] * tc < ts * cnts[nb - 1]:
                nb -= 1
                ts += sums[nb]
                tc += cnts[nb]
        else:
            sums[nb] = ts
            cnts[nb] = tc
            refs[nb] = ref
            nb += 1
            ts = z
            tc = 1.0
    sums[nb] = ts
    cnts[nb] = tc
    refs[nb] = ref
    nb += 1
    pos = 0
    for blk in range(nb):
        sums[blk] = sums[blk] / cnts[blk]          # block means
        starts[pos] = 1
        pos += int(cnts[blk])
    blk = -1
    for k in range(n):
        blk += starts[k]
        out[order[k]] = (ys[k] - refs[blk]) - sums[blk]


@njit(cache=True, nogil=True)
def _pav_row_reference(y, order, wdesc, out, ys, refs, sums, cnts):
    """The previous :func:`_pav_row` (the stack top kept in the arrays), kept as a reference for the tests."""
    n = y.size
    spread = wdesc[0] - wdesc[n - 1] if n > 0 else 0.0
    for i in range(n):
        ys[i] = y[order[i]]
    nb = 0
    floor = 0
    ref = ys[0] if n > 0 else 0.0
    for i in range(n):
        if i > 0 and ys[i - 1] - ys[i] > 2.0 * spread:
            floor = nb          # a new cluster: no pool crosses this gap
            ref = ys[i]
        refs[i] = ref
        sums[nb] = (ys[i] - ref) - wdesc[i]
        cnts[nb] = 1.0
        nb += 1
        while nb > floor + 1 and sums[nb - 2] * cnts[nb - 1] < sums[nb - 1] * cnts[nb - 2]:
            sums[nb - 2] += sums[nb - 1]
            cnts[nb - 2] += cnts[nb - 1]
            nb -= 1
    k = 0
    for blk in range(nb):
        v = sums[blk] / cnts[blk]
        for _ in range(int(cnts[blk])):
            out[order[k]] = (ys[k] - refs[k]) - v
            k += 1


@njit(cache=True, nogil=True)
def _pack_keys(y, nbits):
    """Order-reversing 64-bit image of each value in the high bits, its index in the low ``nbits``."""
    n = y.size
    u = y.view(np.uint64)
    out = np.empty(n, np.uint64)
    sign = np.uint64(1) << np.uint64(63)
    sh = np.uint64(nbits)
    for i in range(n):
        v = u[i]
        # IEEE doubles -> unsigned integers in the same order: flip all bits of negatives,
        # the sign bit of non-negatives; complement to put larger values first
        k = ~v if v & sign else v | sign
        k = ~k
        out[i] = ((k >> sh) << sh) | np.uint64(i)
    return out


@njit(cache=True, nogil=True)
def _unpack_fix(packed, y, nbits):
    """Indices from the sorted packed keys, then exact order inside runs of equal truncated keys."""
    n = packed.size
    sh = np.uint64(nbits)
    mask = (np.uint64(1) << sh) - np.uint64(1)
    order = np.empty(n, np.int64)
    for i in range(n):
        order[i] = np.int64(packed[i] & mask)
    i = 0
    while i < n:
        key = packed[i] >> sh
        j = i + 1
        while j < n and (packed[j] >> sh) == key:
            j += 1
        if j - i > 1:
            if j - i <= 32:
                for a in range(i + 1, j):          # insertion sort, decreasing y
                    t = order[a]
                    v = y[t]
                    c = a - 1
                    while c >= i and y[order[c]] < v:
                        order[c + 1] = order[c]
                        c -= 1
                    order[c + 1] = t
            else:
                seg = order[i:j].copy()
                vals = np.empty(j - i)
                for a in range(j - i):
                    vals[a] = -y[seg[a]]
                p = np.argsort(vals, kind="mergesort")
                for a in range(j - i):
                    order[i + a] = seg[p[a]]
        i = j
    return order


@njit(cache=True, nogil=True)
def order_bits(n):
    """Low bits that hold an index below n in a packed sort key (at least 1)."""
    nbits = 1
    while (1 << nbits) < n:
        nbits += 1
    return nbits


@njit(cache=True, nogil=True)
def pack_rows(Y, nbits, decreasing):
    """Packed sort keys per row: an order-preserving 64-bit image of y (reversed when ``decreasing``)
    in the high bits, the index in the low ``nbits``. Sorting the keys of a row as unsigned integers
    sorts its values up to the dropped low bits, ties by index (:func:`keys_to_order` finishes)."""
    out = np.empty(Y.shape, np.uint64)
    pack_rows_into(Y, nbits, decreasing, out)
    return out


@njit(cache=True, nogil=True)
def pack_rows_into(Y, nbits, decreasing, out):
    """:func:`pack_rows` written into ``out`` (uint64, the shape of Y)."""
    b, n = Y.shape
    sign = np.uint64(1) << np.uint64(63)
    sh = np.uint64(nbits)
    for r in range(b):
        u = Y[r].view(np.uint64)
        for i in range(n):
            v = u[i]
            k = ~v if v & sign else v | sign
            if decreasing:
                k = ~k
            out[r, i] = ((k >> sh) << sh) | np.uint64(i)


@njit(cache=True, nogil=True)
def keys_to_order(packed, y, nbits, decreasing, order):
    """The exact order of y from its sorted packed keys, into ``order`` (ties by index).

    Runs of keys equal in their high bits (values that differ only in the dropped low bits, or
    are equal) are put in exact order by insertion sort (merge sort for runs over 32), which
    keeps equal values in index order. The result is unique: the stable order of y by value
    (decreasing or increasing), where -0.0 and +0.0 count as different (-0.0 first when
    increasing)."""
    n = packed.size
    sh = np.uint64(nbits)
    mask = (np.uint64(1) << sh) - np.uint64(1)
    ties = 0
    for i in range(n):
        order[i] = np.int64(packed[i] & mask)
    for i in range(n - 1):        # branch-free count of adjacent keys equal in their high bits
        ties += np.int64((packed[i] >> sh) == (packed[i + 1] >> sh))
    if ties == 0:
        return
    i = 0
    while i < n:
        key = packed[i] >> sh
        j = i + 1
        while j < n and (packed[j] >> sh) == key:
            j += 1
        if j - i > 1:
            if j - i <= 32:
                for a in range(i + 1, j):
                    t = order[a]
                    v = y[t]
                    c = a - 1
                    while c >= i and ((y[order[c]] < v) if decreasing else (y[order[c]] > v)):
                        order[c + 1] = order[c]
                        c -= 1
                    order[c + 1] = t
            else:
                seg = order[i:j].copy()
                vals = np.empty(j - i)
                for a in range(j - i):
                    vals[a] = -y[seg[a]] if decreasing else y[seg[a]]
                p = np.argsort(vals, kind="mergesort")
                for a in range(j - i):
                    order[i + a] = seg[p[a]]
        i = j


@njit(cache=True, nogil=True)
def permutahedron_rows_keys(Y, keys, nbits, wdesc):
    """Rows of Y onto P(w) given each row's sorted packed keys (decreasing): exact order, then pooling."""
    out = np.empty_like(Y)
    return permutahedron_rows_keys_into(Y, keys, nbits, wdesc, out)


@njit(cache=True, nogil=True)
def permutahedron_rows_keys_into(Y, keys, nbits, wdesc, out):
    """:func:`permutahedron_rows_keys` written into ``out`` (returned)."""
    b, n = Y.shape
    order = np.empty(n, np.int64)
    ys = np.empty(n)
    refs = np.empty(n)
    sums = np.empty(n)
    cnts = np.empty(n)
    starts = np.empty(n, np.int64)
    for r in range(b):
        keys_to_order(keys[r], Y[r], nbits, True, order)
        _pav_row(Y[r], order, wdesc, out[r], ys, refs, sums, cnts, starts)
    return out


@njit(cache=True, nogil=True)
def permutahedron_rows_packed(Y, wdesc):
    """:func:`permutahedron_rows_keys` with the keys packed and sorted here (numba's sort): one
    compiled call, for single points and small batches; the same answer bit for bit (the order
    is unique)."""
    b, n = Y.shape
    if n == 0:
        return np.empty_like(Y)
    nbits = order_bits(n)
    keys = pack_rows(Y, nbits, True)
    for r in range(b):
        keys[r].sort()
    return permutahedron_rows_keys(Y, keys, nbits, wdesc)


@njit(cache=True, nogil=True)
def permutahedron_lmo_keys(C, keys, nbits, wdesc):
    """Rearrangement per row from sorted packed keys (increasing): the k-th largest weight at the
    k-th smallest c, ties by index."""
    out = np.empty_like(C)
    return permutahedron_lmo_keys_into(C, keys, nbits, wdesc, out)


@njit(cache=True, nogil=True)
def permutahedron_lmo_keys_into(C, keys, nbits, wdesc, out):
    """:func:`permutahedron_lmo_keys` written into ``out`` (returned)."""
    b, n = C.shape
    order = np.empty(n, np.int64)
    for r in range(b):
        keys_to_order(keys[r], C[r], nbits, False, order)
        for k in range(n):
            out[r, order[k]] = wdesc[k]
    return out


@njit(cache=True, nogil=True)
def permutahedron_lmo_packed(C, wdesc):
    """:func:`permutahedron_lmo_keys` with keys packed and sorted here (numba's sort), one compiled call."""
    b, n = C.shape
    if n == 0:
        return np.empty_like(C)
    nbits = order_bits(n)
    keys = pack_rows(C, nbits, False)
    for r in range(b):
        keys[r].sort()
    return permutahedron_lmo_keys(C, keys, nbits, wdesc)


# batches with at least this many rows sort their packed keys with NumPy (a vectorized sort)
NUMPY_SORT_ROWS = 64


def permutahedron_lmo(C, wdesc, out=None):
    """Rows of argmin <c, x> over P(w): the k-th largest weight at the k-th smallest c_i.

    Ties in c go by index (the stable order; -0.0 counts as below +0.0). Keys packed from c
    and its indices are sorted as unsigned integers (NumPy's sort for batches, numba's for
    small ones; the same unique order), runs equal in the packed bits finished exactly.
    O(n log n) per row. ``out``: where to write the answer (allocated when None).
    """
    C = np.ascontiguousarray(C, dtype=float)
    b, n = C.shape
    wdesc = np.ascontiguousarray(wdesc, dtype=float)
    if b < NUMPY_SORT_ROWS or n == 0 or n > 2 ** 40:
        X = permutahedron_lmo_packed(C, wdesc) if n <= 2 ** 40 else permutahedron_lmo_rows(C, wdesc)
        return _into(X, out)
    nbits = order_bits(n)
    out = np.empty_like(C) if out is None else out
    for s, e, keys in _key_blocks(b, n):
        pack_rows_into(C[s:e], nbits, False, keys)
        keys.sort(axis=1)
        permutahedron_lmo_keys_into(C[s:e], keys, nbits, wdesc, out[s:e])
    return out


# rows of a batch whose packed keys are sorted together: about this many keys (1 MB), so the keys'
# buffer stays in cache and is reused (one buffer of the whole batch's keys would be a fresh large
# allocation per call, each page of it faulted in)
KEY_BLOCK = 1 << 17


def _key_blocks(b, n):
    """(start, stop, keys buffer) over the rows of a (b, n) batch in blocks of about KEY_BLOCK keys."""
    rows = max(1, min(b, KEY_BLOCK // max(n, 1)))
    buf = np.empty((rows, n), np.uint64)
    for s in range(0, b, rows):
        e = min(b, s + rows)
        yield s, e, buf[:e - s]


def _into(X, out):
    if out is None:
        return X
    out[...] = X
    return out


def decreasing_order(y: np.ndarray) -> np.ndarray:
    """Indices that sort a float64 vector in decreasing order (ties in any order), exact.

    For long vectors this packs an order-preserving 64-bit image of each value
    (its top bits) with the index (low bits) and sorts the integers, which is
    several times faster than an argsort; runs that share the truncated value
    are then put in exact order (insertion sort for short runs).
    """
    y = np.ascontiguousarray(y, dtype=float)
    n = y.size
    nbits = max(1, int(n - 1).bit_length())
    if n < 50_000 or nbits > 40:
        return np.argsort(-y, kind="stable")
    packed = _pack_keys(y, nbits)
    packed.sort()
    return _unpack_fix(packed, y, nbits)


def project_permutahedron(Y: np.ndarray, wdesc: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """Project the rows of Y onto the permutahedron of w (``wdesc``: w sorted decreasingly).

    Sort each row, then pool-adjacent-violators; O(n log n) per row. Rows shorter than
    50,000 sort packed keys (value bits and index, see :func:`pack_rows`): the order is the
    stable decreasing order of y (ties by index; +0.0 before -0.0), unique, so batches
    (NumPy's sort) and single points (numba's) give the same answer bit for bit. ``out``: where to
    write the answer (allocated when None).
    """
    Y = np.ascontiguousarray(Y, dtype=float)
    b, n = Y.shape
    if n < 50_000:
        wdesc = np.ascontiguousarray(wdesc, dtype=float)
        if b < NUMPY_SORT_ROWS or n == 0:
            return _into(permutahedron_rows_packed(Y, wdesc), out)
        nbits = order_bits(n)
        out = np.empty_like(Y) if out is None else out
        for s, e, keys in _key_blocks(b, n):
            pack_rows_into(Y[s:e], nbits, True, keys)
            keys.sort(axis=1)                    # NumPy's vectorized sort (releases the GIL)
            permutahedron_rows_keys_into(Y[s:e], keys, nbits, wdesc, out[s:e])
        return out
    if b == 1:
        order = decreasing_order(Y[0])[None, :]
    else:
        order = np.argsort(-Y, axis=1, kind="stable")
    out = np.empty_like(Y) if out is None else out
    _permutahedron_rows(Y, np.ascontiguousarray(order), np.ascontiguousarray(wdesc, dtype=float), out)
    return out


@njit(cache=True, nogil=True)
def permutahedron_rows_sorted_inside(Y, wdesc):
    """``project_permutahedron`` for rows shorter than 50,000 in one compiled call: each row's
    stable decreasing order (a merge sort of -y, the order NumPy's stable argsort gives), then
    the same pooling as ``_permutahedron_rows``. O(n log n) per row, one allocation per call."""
    b, n = Y.shape
    out = np.empty_like(Y)
    order = np.empty((1, n), np.int64)
    for r in range(b):
        order[0] = np.argsort(-Y[r], kind="mergesort")
        _permutahedron_rows(Y[r:r + 1], order, wdesc, out[r:r + 1])
    return out


@njit(cache=True, nogil=True)
def permutahedron_lmo_rows(C, wdesc):
    """Rearrangement per row: the k-th largest weight at the k-th smallest c (stable ties), O(n log n)."""
    b, n = C.shape
    out = np.empty_like(C)
    for r in range(b):
        order = np.argsort(C[r], kind="mergesort")
        for k in range(n):
            out[r, order[k]] = wdesc[k]
    return out
