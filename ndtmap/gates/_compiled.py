"""The compiled gate kernel: every output of a gate in one read of the window (private).

:func:`gate_kernel` gives exactly what :func:`ndtmap.gates.kernels.reference_gate_kernel` (the
numpy reference) gives on the detection signal, bit for bit, but works on the
recorded samples directly: int16 (and other integer) counts are scaled to
%FSH one sample at a time, RF data are rectified one sample at a time (``abs``
in int32 or uint16, so -32768 cannot overflow), and nothing the size of the
window is allocated.

How the A-scans are read
    Samples are compared through an integer *key* that orders them exactly
    as their %FSH values do: the count itself (its absolute value for RF)
    for integer data; for float32 data the IEEE-754 bit pattern (the sign
    bit cleared for RF, negative values negated for signed data, so that
    -0.0 and +0.0 share a key). Integer maxima vectorise (SIMD); float
    maxima with IEEE NaN rules do not.

    A batch of :data:`ROWS` A-scans is swept first: each window is cut into
    blocks of :data:`BLOCK` samples and the largest key of every block is
    kept (the last block is moved back to end at the window's end, so every
    block is whole). This is the only pass that reads the window from
    memory. Each A-scan of the batch is then finished from the cache: the
    highest sample (the first block holding the maximum, then the first
    sample in it), the parabola through it and its neighbours, the first
    sample at or above the threshold (found the same way), the linear
    interpolation of the crossing, and the crossing echo, followed ``hold``
    samples at a time until ``hold`` samples in a row lie below the
    threshold. With Hilbert taps (RF data) the peak time is the echo's time
    on its envelope, computed at the few samples around the highest one
    from the signed samples of the slice (the FIR filter, the climb to the
    envelope maximum and the centroid above half of it, summed in the
    order of the numpy reference). While a batch is finished, the windows of the next batch
    are requested from memory (a prefetch hint), so computing and reading
    overlap.

    A float32 sample is NaN or infinite when its key's magnitude is at
    least ``0x7f800000``; a NaN in the window makes every output NaN, as in
    the reference. With ``check_record`` the samples outside the window are
    checked as well (a missing A-scan is one with a non-finite sample
    anywhere), in the same pass: before the window, the window, after it.

Threshold
    The threshold (float64 %FSH) is turned into the smallest key whose
    %FSH value is at or above it, once per call, so the comparisons in the
    loops are exact integer comparisons that agree with the reference's
    float64 comparisons sample for sample.

Compilation
    The kernels are compiled by numba on first use (a few seconds per
    sample type) and cached on disk (``cache=True``); they release the GIL
    (``nogil=True``), so dask threads and the thread split of large
    in-memory grids run them in parallel.
"""

from __future__ import annotations

import math

import numpy as np

from ndtmap.gates.timing import ENVELOPE_LEVEL

try:  # numba is a dependency; the numpy reference kernel is the fallback should it fail to import
    from numba import njit

    HAVE_NUMBA = True
except ImportError:  # pragma: no cover - exercised only without numba
    HAVE_NUMBA = False

__all__ = ["HAVE_NUMBA", "BLOCK", "KIND_INT_ABS", "KIND_INT", "KIND_F32_ABS", "KIND_F32",
           "KIND_I16_ABS", "gate_rows",
           "threshold_key", "nonfinite_rows", "sample_kind"]

#: Samples per block of the first (vectorised) sweep over the window.
BLOCK = 128

#: A-scans swept in one batch before they are finished one by one (their samples are then still cached).
ROWS = 16

KIND_INT_ABS = 0  # integer counts, rectified here: key = |count| (int32)
KIND_INT = 1  # integer counts as recorded: key = count
KIND_F32_ABS = 2  # float32 bit patterns (as int32), rectified here: key = bits & 0x7fffffff
KIND_F32 = 3  # float32 bit patterns as recorded: key = +-(bits & 0x7fffffff)
KIND_I16_ABS = 4  # int16 counts rectified here: as KIND_INT_ABS, swept in 16-bit lanes (|-32768| fits uint16)

_MAG = 0x7FFFFFFF
_NONFINITE = 0x7F800000  # magnitude bits of +inf; anything at or above is inf or NaN


def sample_kind(dtype: np.dtype, rectify: bool) -> int:
    """The kernel's key kind for samples of `dtype` (integer or float32)."""
    if np.issubdtype(dtype, np.integer):
        if rectify and np.dtype(dtype) == np.int16:
            return KIND_I16_ABS
        return KIND_INT_ABS if rectify else KIND_INT
    return KIND_F32_ABS if rectify else KIND_F32


def _f32_key(value: np.float32) -> int:
    bits = int(np.array(value, dtype=np.float32).view(np.int32))
    mag = bits & _MAG
    return -mag if bits < 0 else mag


def threshold_key(threshold: float, kind: int, scale: float) -> int:
    """The smallest key whose %FSH value, as float64, is >= `threshold`.

    For integer kinds the value of key ``k`` is ``float64(float32(k) *
    float32(scale))``, as :func:`ndtmap.grid.schema.ascan_in_fsh` computes it; for
    float32 kinds it is the float32 number itself.
    """
    thr = float(threshold)
    if kind in (KIND_F32_ABS, KIND_F32):
        f = np.float32(thr)
        if float(f) < thr:
            f = np.nextafter(f, np.float32(np.inf))
        return _f32_key(f)
    s32 = np.float32(scale)

    def value(k: int) -> float:
        return float(np.float32(k) * s32)

    limit = 2**40  # beyond any integer sample; keeps the search finite
    k = int(min(max(math.ceil(thr / float(s32)), -limit), limit))
    while k > -limit and value(k - 1) >= thr:
        k -= 1
    while k < limit and value(k) < thr:
        k += 1
    return k


if HAVE_NUMBA:
    from llvmlite import ir as _ir
    from numba import types as _types
    from numba.core import cgutils as _cgutils
    from numba.extending import intrinsic as _intrinsic

    @_intrinsic
    def _prefetch(typingctx, arr, i, j):  # pragma: no cover - compiled
        """Ask the CPU to start loading the cache line of arr[i, j] into the L2 cache (llvm.prefetch; a hint
        that changes no value)."""
        if not isinstance(arr, _types.Array) or arr.ndim != 2:
            return None
        sig = _types.void(arr, i, j)

        def codegen(context, builder, signature, args):
            aryty = signature.args[0]
            ary = context.make_array(aryty)(context, builder, args[0])
            inds = [context.cast(builder, args[1], signature.args[1], _types.intp),
                    context.cast(builder, args[2], signature.args[2], _types.intp)]
            ptr = _cgutils.get_item_pointer(context, builder, aryty, ary, inds, wraparound=False, boundscheck=False)
            if getattr(ptr.type, "is_opaque", False):
                name = "llvm.prefetch.p0"
            else:  # typed pointers (older LLVM)
                ptr = builder.bitcast(ptr, _ir.IntType(8).as_pointer())
                name = "llvm.prefetch.p0i8"
            i32 = _ir.IntType(32)
            fnty = _ir.FunctionType(_ir.VoidType(), [ptr.type, i32, i32, i32])
            fn = _cgutils.get_or_insert_function(builder.module, fnty, name)
            builder.call(fn, [ptr, i32(0), i32(2), i32(1)])  # read, keep in L2 and below, data
            return context.get_dummy_value()

        return sig, codegen

    # Samples are read as xk[t, j] with unsigned indices: numba then emits no negative-index fix-up and
    # creates no array views (each view costs a reference-count update), which keeps the loops SIMD and
    # the per-A-scan work small.

    @njit(cache=True, nogil=True, inline="always")
    def _at(xk, t, j):  # pragma: no cover - compiled
        return xk[np.uint64(t), np.uint64(j)]

    @njit(cache=True, nogil=True, inline="always")
    def _key(v, kind):  # pragma: no cover - compiled
        """Integer key of one sample (int32 arithmetic throughout, so loops stay in wide SIMD lanes)."""
        i32 = np.int32
        r = i32(v)
        if kind == KIND_INT_ABS or kind == KIND_I16_ABS:
            return i32(r if r >= 0 else -r)
        if kind == KIND_INT:
            return r
        u = i32(r & i32(_MAG))
        if kind == KIND_F32_ABS:
            return u
        return i32(-u if r < 0 else u)

    @njit(cache=True, nogil=True, inline="always")
    def _value(xk, xv, t, j, kind, s32):  # pragma: no cover - compiled
        """The %FSH value of sample j of row t (float64), computed as the reference computes it."""
        if kind == KIND_INT_ABS or kind == KIND_I16_ABS:
            return np.float64(np.float32(_key(_at(xk, t, j), kind)) * s32)
        if kind == KIND_INT:
            return np.float64(np.float32(_at(xk, t, j)) * s32)
        if kind == KIND_F32_ABS:
            return abs(np.float64(_at(xv, t, j)))
        return np.float64(_at(xv, t, j))

    @njit(cache=True, nogil=True, inline="always")
    def _key_value(key, kind, s32, bits, bits_f32):  # pragma: no cover - compiled
        """The %FSH value (float64) of a key >= 0 (a sample at or above a threshold >= 0)."""
        if kind == KIND_F32_ABS or kind == KIND_F32:
            bits[0] = key  # a non-negative key is the bit pattern itself
            return np.float64(bits_f32[0])
        return np.float64(np.float32(key) * s32)

    @njit(cache=True, nogil=True, inline="always")
    def _signed(xk, xv, t, j, kind, s32):  # pragma: no cover - compiled
        """The signed %FSH value (float64) of sample j of row t of RF data (a rectifying kind), as recorded."""
        if kind == KIND_F32_ABS or kind == KIND_F32:
            return np.float64(_at(xv, t, j))
        return np.float64(np.float32(_at(xk, t, j)) * s32)

    @njit(cache=True, nogil=True, inline="always")
    def _envelope_at(xk, xv, t, j, kind, s32, taps, j0, j1):  # pragma: no cover - compiled
        """|analytic signal| of sample j of row t: the Hilbert transform from the odd FIR `taps` (samples outside
        the slice [j0, j1) count as 0), summed tap by tap in the order of the numpy reference."""
        hs = 0.0
        for i in range(taps.size):
            m = 2 * i + 1
            a = _signed(xk, xv, t, j - m, kind, s32) if j - m >= j0 else 0.0
            b = _signed(xk, xv, t, j + m, kind, s32) if j + m < j1 else 0.0
            hs += taps[i] * (a - b)
        v = _signed(xk, xv, t, j, kind, s32)
        return math.sqrt(v * v + hs * hs)

    @njit(cache=True, nogil=True, inline="always")
    def _envelope_centre(xk, xv, t, k, lo, hi, kind, s32, taps, j0, j1):  # pragma: no cover - compiled
        """The echo's time on the envelope, as sample p and offset delta (see :func:`ndtmap.gates.kernels.
        reference_gate_kernel`): climb from sample k to the envelope maximum p inside [lo, hi] (at most
        ``taps.size`` steps), then the centroid of ``E - ENVELOPE_LEVEL E(p)`` over the samples around p where
        it is positive (the echo between its -6 dB points), within [lo, hi] and ``taps.size`` samples of p;
        the filter reads the slice [j0, j1). The envelope is computed sample by sample where needed (about
        20 samples for an echo; computing a block of samples at once in SIMD lanes was slower)."""
        reach = taps.size
        p = k
        ep = _envelope_at(xk, xv, t, p, kind, s32, taps, j0, j1)
        step = 0
        if p + 1 <= hi and _envelope_at(xk, xv, t, p + 1, kind, s32, taps, j0, j1) > ep:
            step = 1
        elif p - 1 >= lo and _envelope_at(xk, xv, t, p - 1, kind, s32, taps, j0, j1) > ep:
            step = -1
        for _ in range(reach):
            if step == 0:
                break
            q = p + step
            if q < lo or q > hi:
                break
            eq = _envelope_at(xk, xv, t, q, kind, s32, taps, j0, j1)
            if not eq > ep:
                break
            p = q
            ep = eq
        level = ENVELOPE_LEVEL * ep
        den = ep - level
        num = 0.0
        q = p - 1
        while q >= lo and p - q <= reach:
            w = _envelope_at(xk, xv, t, q, kind, s32, taps, j0, j1) - level
            if not w > 0.0:
                break
            num += np.float64(q - p) * w
            den += w
            q -= 1
        q = p + 1
        while q <= hi and q - p <= reach:
            w = _envelope_at(xk, xv, t, q, kind, s32, taps, j0, j1) - level
            if not w > 0.0:
                break
            num += np.float64(q - p) * w
            den += w
            q += 1
        delta = num / den if den > 0.0 else 0.0
        return p, delta

    @njit(cache=True, nogil=True, inline="always")
    def _sweep(xk, t, j0, kind, count):  # pragma: no cover - compiled
        """Largest key and largest magnitude bits (float kinds; the NaN check) of samples j0 .. j0 + count - 1.

        Called with the constant BLOCK the loop has a fixed length; int32 (for int16 data uint16)
        arithmetic throughout keeps it in wide SIMD lanes.
        """
        i32 = np.int32
        ut = np.uint64(t)
        uj = np.uint64(j0)
        if kind == KIND_I16_ABS:
            m16 = np.uint16(0)
            for j in range(count):
                v = xk[ut, uj + np.uint64(j)]
                m16 = np.uint16(max(m16, np.uint16(v) if v >= 0 else np.uint16(-v)))
            return i32(m16), i32(0)
        if kind == KIND_F32:
            mask = i32(_MAG)
            m = i32(-(2**31))
            a = i32(0)
            for j in range(count):
                r = i32(xk[ut, uj + np.uint64(j)])
                u = i32(r & mask)
                m = i32(max(m, i32(-u if r < 0 else u)))
                a = i32(max(a, u))
            return m, a
        m = i32(-(2**31))
        for j in range(count):
            m = i32(max(m, _key(xk[ut, uj + np.uint64(j)], kind)))
        return m, (m if kind == KIND_F32_ABS else i32(0))

    @njit(cache=True, nogil=True, inline="always")
    def _first(xk, t, j0, kind, key, count, at_least):  # pragma: no cover - compiled
        """Offset from j0 of the first sample whose key equals (or, `at_least`, reaches) `key` (count if none)."""
        ut = np.uint64(t)
        uj = np.uint64(j0)
        if kind == KIND_I16_ABS:  # 16-bit lanes: keys are 0 .. 32768 and offsets below BLOCK
            k16 = np.uint16(max(0, min(key, 65535)))
            first16 = np.int16(count)
            for j in range(count):
                v = xk[ut, uj + np.uint64(j)]
                u = np.uint16(v) if v >= 0 else np.uint16(-v)
                hit = u >= k16 if at_least else u == k16
                first16 = np.int16(min(first16, np.int16(j) if hit else np.int16(count)))
            return np.int64(first16)
        i32 = np.int32
        first = i32(count)
        for j in range(count):
            v = _key(xk[ut, uj + np.uint64(j)], kind)
            hit = v >= key if at_least else v == key
            first = i32(min(first, i32(j) if hit else i32(count)))
        return np.int64(first)

    @njit(cache=True, nogil=True, inline="always")
    def _last_at_least(xk, t, j0, kind, key, count):  # pragma: no cover - compiled
        """Offset from j0 of the last of `count` samples whose key reaches `key` (-1 if none), and their largest
        key."""
        ut = np.uint64(t)
        uj = np.uint64(j0)
        i32 = np.int32
        last = i32(-1)
        m = i32(-(2**31))
        for j in range(count):
            v = _key(xk[ut, uj + np.uint64(j)], kind)
            last = i32(max(last, i32(j) if v >= key else i32(-1)))
            m = i32(max(m, v))
        return np.int64(last), m

    @njit(cache=True, nogil=True, inline="always")
    def _find(xk, t, j0, seglen, kind, key, at_least):  # pragma: no cover - compiled
        """Index of the first sample of the block j0 .. j0 + seglen - 1 whose key equals (reaches) `key`."""
        if seglen == BLOCK:
            return j0 + _first(xk, t, j0, kind, key, BLOCK, at_least)
        return j0 + _first(xk, t, j0, kind, key, seglen, at_least)

    @njit(cache=True, nogil=True, inline="always")
    def _magnitude(xk, t, j0, j1):  # pragma: no cover - compiled
        """Largest float32 magnitude (bits) of samples j0 .. j1 - 1 of row t: >= 0x7f800000 means a non-finite
        sample."""
        i32 = np.int32
        ut = np.uint64(t)
        uj = np.uint64(j0)
        mask = i32(_MAG)
        a = i32(0)
        for j in range(j1 - j0):
            a = i32(max(a, i32(i32(xk[ut, uj + np.uint64(j)]) & mask)))
        return a

    def _make_gate_rows(kind: int):
        """The gate kernel for one key kind (a compile-time constant, so no branch on it is left in the loops)."""

        @njit(cache=True, nogil=True)
        def gate_rows(xk, xv, base, length, starts, ends, t0, dt, thr, key_thr, hold, s32, check_record, taps,
                      peak, peak_time, cross_time, cross_peak):  # pragma: no cover - compiled
            """Gate every row of `xk` (A-scans along the last axis) in the virtual slice [base, base + length).

            `starts`/`ends` are inclusive window bounds per row in sample numbers of that slice (float, NaN:
            no window), `t0` the time of sample `base`. Outputs are written into the four float64 arrays.
            With `taps` (not empty; rectifying kinds only) the peak time is the envelope maximum near the
            highest sample, the filter reading the slice around the window (see :func:`gate_kernel`).
            """
            i32 = np.int32
            n_rows = xk.shape[0]
            n_blocks = (length + BLOCK - 1) // BLOCK + 1
            bmax = np.empty((ROWS, n_blocks), dtype=np.int32)
            swept = np.empty(ROWS, dtype=np.bool_)
            bits = np.empty(1, dtype=np.int32)  # to read a float32 key back as its number
            bits_f32 = bits.view(np.float32)
            h = max(1, hold)
            kt = i32(key_thr)
            line = max(1, 64 // xk.itemsize)  # samples per 64-byte cache line
            nan = np.nan
            use_envelope = taps.size > 0 and (kind == KIND_INT_ABS or kind == KIND_I16_ABS or kind == KIND_F32_ABS)
            for first_row in range(0, n_rows, ROWS):
                end_row = min(first_row + ROWS, n_rows)
                # phase 1, a tight streaming loop over a batch of A-scans: the largest key of every block.
                # The last block is moved back to end at `hi` (overlapping the one before), so that all
                # blocks of a window of BLOCK samples or more are whole; block b starts at
                # min(lo + b BLOCK, last). Phase 2 then finishes each A-scan of the batch from the cache.
                for t in range(first_row, end_row):
                    r = t - first_row
                    s = starts[t]
                    e = ends[t]
                    swept[r] = False
                    if not (s <= e and s >= 0.0 and e <= length - 1):  # also False for NaN
                        continue
                    lo = base + np.int64(s)
                    hi = base + np.int64(e)
                    w = hi - lo + 1
                    seglen = min(BLOCK, w)
                    last = hi - seglen + 1
                    nb = (w + BLOCK - 1) // BLOCK
                    check = check_record and (kind == KIND_F32_ABS or kind == KIND_F32)
                    # with `check`, the samples before the window, the window and the samples after it are
                    # read in this order, one stream through the record
                    outside = _magnitude(xk, t, 0, lo) if check else i32(0)
                    mag = i32(0)
                    if seglen == BLOCK:
                        for b in range(nb):
                            m, a = _sweep(xk, t, min(lo + b * BLOCK, last), kind, BLOCK)
                            bmax[r, b] = m
                            mag = i32(max(mag, a))
                    else:
                        m, a = _sweep(xk, t, lo, kind, seglen)
                        bmax[r, 0] = m
                        mag = a
                    if kind == KIND_F32_ABS or kind == KIND_F32:
                        if mag >= _NONFINITE:  # NaN or infinity in the window: a missing A-scan
                            continue
                        if check:
                            outside = i32(max(outside, _magnitude(xk, t, hi + 1, xk.shape[1])))
                            if outside >= _NONFINITE:
                                continue
                    swept[r] = True
                for t in range(first_row, end_row):
                    r = t - first_row
                    # while this batch is finished from the cache, the window of the matching A-scan of the
                    # next batch is requested from memory, so that computing and reading overlap
                    tn = t + ROWS
                    if tn < n_rows:
                        sn = starts[tn]
                        en = ends[tn]
                        if sn <= en and sn >= 0.0 and en <= length - 1:
                            j_start = 0 if check_record else base + np.int64(sn)
                            j_end = xk.shape[1] - 1 if check_record else base + np.int64(en)
                            for jj in range(j_start, j_end + 1, line):
                                _prefetch(xk, np.uint64(tn), np.uint64(jj))
                            _prefetch(xk, np.uint64(tn), np.uint64(j_end))
                    peak[t] = nan
                    peak_time[t] = nan
                    cross_time[t] = nan
                    cross_peak[t] = nan
                    if not swept[r]:
                        continue
                    lo = base + np.int64(starts[t])
                    hi = base + np.int64(ends[t])
                    w = hi - lo + 1
                    seglen = min(BLOCK, w)
                    last = hi - seglen + 1
                    nb = (w + BLOCK - 1) // BLOCK
                    top = bmax[r, 0]
                    for b in range(1, nb):
                        top = max(top, bmax[r, b])
                    # highest sample: the first block holding the maximum, then the first sample in it
                    if kind == KIND_F32 and top <= -_NONFINITE:
                        k = base  # every sample is -inf: numpy's argmax answers the first sample of the slice
                    else:
                        b = 0
                        while bmax[r, b] != top:
                            b += 1
                        k = _find(xk, t, min(lo + b * BLOCK, last), seglen, kind, top, False)
                    pk = _value(xk, xv, t, k, kind, s32)
                    delta = 0.0
                    if use_envelope and top >= kt:  # a detected echo's time: its envelope, not a crest
                        k, delta = _envelope_centre(xk, xv, t, k, lo, hi, kind, s32, taps, base, base + length)
                    elif k - 1 >= lo and k + 1 <= hi:
                        y0 = _value(xk, xv, t, k - 1, kind, s32)
                        y2 = _value(xk, xv, t, k + 1, kind, s32)
                        denom = y0 - 2.0 * pk + y2
                        if denom < 0:
                            delta = 0.5 * (y0 - y2) / denom
                            if delta < -0.5:
                                delta = -0.5
                            elif delta > 0.5:
                                delta = 0.5
                    peak[t] = pk
                    peak_time[t] = t0 + (np.float64(k - base) + delta) * dt
                    if top < kt:
                        continue
                    # first crossing: the first block that reaches the threshold, then the first sample in it
                    b = 0
                    while bmax[r, b] < kt:
                        b += 1
                    c = _find(xk, t, min(lo + b * BLOCK, last), seglen, kind, kt, True)
                    yc = _value(xk, xv, t, c, kind, s32)
                    if c <= lo:
                        frac = 1.0
                    else:
                        yp = _value(xk, xv, t, c - 1, kind, s32)
                        frac = (thr - yp) / (yc - yp)
                        if frac < 0.0:
                            frac = 0.0
                        elif frac > 1.0:
                            frac = 1.0
                    cross_time[t] = t0 + (np.float64(c - 1 - base) + frac) * dt
                    # the crossing echo ends where `h` samples in a row lie below the threshold. From the last
                    # sample p at or above the threshold, the next h samples are read at once (SIMD): if none
                    # reaches the threshold the echo has ended (or runs to the window's end); else the walk
                    # jumps to the last one that does. Below-threshold samples are below the crossing sample,
                    # so taking them into the maximum cannot change the echo's peak.
                    best = _key(_at(xk, t, c), kind)
                    p = c
                    while p < hi:
                        count = min(h, hi - p)
                        jump, top_h = _last_at_least(xk, t, p + 1, kind, kt, count)
                        if jump < 0:
                            break
                        best = max(best, top_h)
                        p = p + 1 + jump
                    cross_peak[t] = _key_value(best, kind, s32, bits, bits_f32)

        return gate_rows

    _GATE_ROWS = {k: _make_gate_rows(k) for k in (KIND_INT_ABS, KIND_INT, KIND_F32_ABS, KIND_F32, KIND_I16_ABS)}

    @njit(cache=True, nogil=True)
    def nonfinite_rows(xk, out):  # pragma: no cover - compiled
        """out[t] = True where row t of float32 bit patterns holds a NaN or infinity."""
        i32 = np.int32
        mask = i32(_MAG)
        for t in range(xk.shape[0]):
            ut = np.uint64(t)
            a = i32(0)
            for j in range(xk.shape[1]):
                a = i32(max(a, i32(i32(xk[ut, np.uint64(j)]) & mask)))
            out[t] = a >= _NONFINITE

else:  # pragma: no cover
    _GATE_ROWS = {}
    nonfinite_rows = None


def gate_rows(xk, xv, kind, *args):  # type: ignore[no-untyped-def]
    """Run the compiled gate kernel of key kind `kind` (see :func:`_make_gate_rows`)."""
    return _GATE_ROWS[kind](xk, xv, *args)


_SLAB_BYTES = 32 * 2**20  # float64 (or other) samples are converted to float32 this many bytes at a time

#: Smallest array (bytes) worth splitting over threads.
THREAD_MIN_BYTES = 32 * 2**20


def gate_kernel(
    samples: np.ndarray,
    i_start: np.ndarray | float,
    i_end: np.ndarray | float,
    *,
    t0_us: float,
    dt_us: float,
    threshold: float,
    hold: int,
    base: int = 0,
    length: int | None = None,
    scale: float = 1.0,
    rectify: bool = False,
    check_record: bool = False,
    threads: int = 1,
    hilbert_taps: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """All outputs of one gate from the recorded samples, in one read of the window.

    Equals :func:`ndtmap.gates.kernels.reference_gate_kernel` applied to the detection signal
    of ``samples[..., base:base + length]`` (``|a|`` with `rectify`, the
    counts times `scale` for integer data, float32 throughout), with the
    window ``[i_start, i_end]`` counted from `base` and `t0_us` the time of
    sample `base`; the samples outside that slice are never read, except
    with `check_record`, which also makes every output NaN for an A-scan
    with a NaN or infinite sample anywhere on the last axis (a missing
    A-scan). With `hilbert_taps`, the filter reads up to
    ``2 len(hilbert_taps) - 1`` samples on either side of the samples whose
    envelope it computes, within the slice (samples beyond it count as 0):
    give a slice that reaches that far beyond the windows.

    Parameters
    ----------
    samples : ndarray (..., n)
        int8/16, uint8/16 counts or float32/float64 samples (float64 is
        converted to float32, as :func:`ndtmap.grid.schema.ascan_in_fsh` does).
    i_start, i_end : float or ndarray (...)
        Inclusive window per A-scan in samples from `base` (NaN: none).
    t0_us, dt_us, threshold, hold
        As for the reference kernel; `threshold` must be >= 0.
    base, length : int
        The slice of the last axis the window numbers refer to (default
        the whole axis).
    scale : float
        %FSH per count for integer samples (ignored for float samples).
    rectify : bool
        Take ``|a|`` (RF data); otherwise the samples as they are.
    check_record : bool
        Treat A-scans with a non-finite sample anywhere as missing.
    threads : int
        Split the A-scans over this many threads (the kernel releases the
        GIL) when there are at least :data:`THREAD_MIN_BYTES` of samples;
        1 inside dask tasks, which are parallel already.
    hilbert_taps : ndarray, optional
        With `rectify` (RF data): the odd taps of the FIR Hilbert
        transformer (:func:`ndtmap.gates.kernels.hilbert_taps`); the peak
        time is then the envelope maximum near the highest sample, with the
        parabola through the envelope (as the reference kernel with the
        same taps computes it). Ignored without `rectify`.

    Returns
    -------
    peak, peak_time, cross_time, cross_peak : ndarray (...) float64
    """
    x = np.asarray(samples)
    n = x.shape[-1]
    lead = x.shape[:-1]
    length = n - base if length is None else int(length)
    if not HAVE_NUMBA:  # pragma: no cover
        raise RuntimeError("numba is not available")
    if threshold < 0:
        raise ValueError("the compiled gate kernel needs a threshold >= 0")
    if not (0 <= base and base + length <= n):
        raise ValueError(f"slice {base} + {length} does not fit a record of {n} samples")
    rows = int(np.prod(lead)) if lead else 1
    outs = tuple(np.empty(rows) for _ in range(4))
    if rows == 0 or n == 0 or length <= 0:
        for o in outs:
            o.fill(np.nan)
        return tuple(o.reshape(lead) for o in outs)  # type: ignore[return-value]
    starts = np.ascontiguousarray(np.broadcast_to(np.asarray(i_start, dtype=np.float64), lead).reshape(rows))
    ends = np.ascontiguousarray(np.broadcast_to(np.asarray(i_end, dtype=np.float64), lead).reshape(rows))
    x2 = x.reshape(rows, n)
    n_threads = max(1, int(threads)) if x2.nbytes >= THREAD_MIN_BYTES else 1
    if x2.dtype.kind in "iu" and x2.dtype.itemsize <= 2:
        kind = sample_kind(x2.dtype, rectify)
        whole: np.ndarray | None = x2.astype(x2.dtype.newbyteorder("="), copy=False)
    else:
        kind = sample_kind(np.dtype(np.float32), rectify)
        whole = x2 if x2.dtype == np.float32 else None  # other floats: converted slab by slab
    if whole is not None:
        bounds = np.linspace(0, rows, n_threads + 1).astype(int)
    else:
        per = max(1, _SLAB_BYTES // max(1, n * x2.dtype.itemsize))
        bounds = np.r_[np.arange(0, rows, per), rows]
    jobs = [(int(r0), int(r1)) for r0, r1 in zip(bounds[:-1], bounds[1:], strict=True) if r1 > r0]
    key_thr = int(min(max(threshold_key(threshold, kind, scale), -(2**31)), 2**31 - 1))
    s32 = np.float32(scale)
    dummy = np.zeros((1, 1), dtype=np.float32)
    taps = np.zeros(0) if hilbert_taps is None or not rectify else np.ascontiguousarray(hilbert_taps, dtype=np.float64)

    def run(job: tuple[int, int]) -> None:
        r0, r1 = job
        block = whole[r0:r1] if whole is not None else x2[r0:r1].astype(np.float32)
        if block.dtype == np.float32:
            xk, xv = block.view(np.int32), block
        else:
            xk, xv = block, dummy
        gate_rows(xk, xv, kind, int(base), int(length), starts[r0:r1], ends[r0:r1], float(t0_us), float(dt_us),
                  float(threshold), key_thr, int(hold), s32, bool(check_record), taps, *(o[r0:r1] for o in outs))

    if n_threads > 1 and len(jobs) > 1:
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(max_workers=n_threads) as pool:
            list(pool.map(run, jobs))
    else:
        for job in jobs:
            run(job)
    return tuple(o.reshape(lead) for o in outs)  # type: ignore[return-value]
