"""Two's-complement integers wider than 64 bits as arrays of 32-bit words (limbs).

A value is ``sum_i limb_i 2**(32 i)``: the lower limbs hold ``[0, 2**32)`` in int64,
the top limb is a signed int64 that wraps modulo ``2**64``, so ``K`` limbs hold
``32 (K - 1) + 64`` bits modulo their capacity: the ring a CIC register needs
(Hogenauer 1981: wrap-around is harmless).  Every operation works limb by limb
in vectorised int64 and then propagates carries, so a CIC of 80-120 bits runs a
few times slower than one in plain int64, not a hundred times as Python integers do.

Carry propagation: ``carry = limb >> 32`` (arithmetic, the floor), ``limb &= 2**32 - 1``,
the next limb gains the carry (common practice for multi-word arithmetic, e.g.
D. E. Knuth, TAOCP vol. 2, sec. 4.3.1, from memory).
"""

import numpy as np

__all__ = ["limbs_for", "split", "join", "normalize", "add", "sub", "cumsum", "shift_right", "wrap", "take"]

_MASK = np.int64(0xFFFFFFFF)


def limbs_for(width):
    """Number of limbs holding a ``width``-bit register (1 up to 64 bits)."""
    return 1 if width <= 64 else 1 + -(-(width - 64) // 32)


def split(x, k):
    """int64 array -> ``k`` limbs (sign-extended)."""
    x = np.asarray(x, dtype=np.int64)
    sign = np.where(x < 0, np.int64(-1), np.int64(0))
    out = []
    for i in range(k - 1):
        out.append((x >> (32 * i)) & _MASK if 32 * i < 64 else sign & _MASK)
    out.append(x >> (32 * (k - 1)) if 32 * (k - 1) < 64 else sign)
    return out


def join(a, exact=False):
    """Limbs -> int64 (exact when the value fits 64 bits); ``exact``: Python integers."""
    if exact:
        x = a[-1].astype(object)
        for limb in a[-2::-1]:
            x = x * (1 << 32) + limb.astype(object)
        return x
    x = a[0].copy()
    if len(a) > 1:
        x = x + (a[1] << 32)
    return x


def normalize(a):
    """Propagate carries so that the lower limbs lie in ``[0, 2**32)`` (in place)."""
    for i in range(len(a) - 1):
        carry = a[i] >> 32
        a[i] = a[i] & _MASK
        a[i + 1] = a[i + 1] + carry
    return a


def add(a, b):
    return normalize([x + y for x, y in zip(a, b)])


def sub(a, b):
    return normalize([x - y for x, y in zip(a, b)])


def cumsum(a, axis=0):
    """Running sum along ``axis`` (lower limbs stay below 2**63 for < 2**31 rows)."""
    return normalize([np.cumsum(x, axis=axis, dtype=np.int64) for x in a])


def shift_right(a, s):
    """``floor(value / 2**s)``, arithmetic, keeping the number of limbs."""
    if s == 0:
        return [x.copy() for x in a]
    q, t = divmod(s, 32)
    k = len(a)
    if q:
        if q >= k:
            sign = a[-1] >> 63
            return normalize([np.zeros_like(a[0]) for _ in range(k - 1)] + [sign])
        # the old top limb, now a lower one, carries its sign into the limbs above
        a = normalize(list(a[q:]) + [np.zeros_like(a[0]) for _ in range(q)])
    if t:
        out = [((a[i] >> t) | (a[i + 1] << (32 - t))) & _MASK for i in range(k - 1)]
        out.append(a[-1] >> t)
        a = out
    return a


def wrap(a, width):
    """Reduce to a ``width``-bit two's-complement register (sign-extend from bit width-1)."""
    k = len(a)
    base = 32 * (k - 1)
    a = list(a)
    if width >= base + 64:
        return a
    j = (width - 1) // 32 if width <= base else k - 1
    t = width - 32 * j
    v = a[j]
    if t < 64:
        sign = np.int64(1 << (t - 1))
        v = ((v & np.int64((1 << t) - 1)) ^ sign) - sign
    a[j] = v
    for i in range(j + 1, k):
        a[i] = np.zeros_like(v)
    return normalize(a)


def take(a, index):
    """Index every limb alike (slicing, decimation)."""
    return [x[index] for x in a]
