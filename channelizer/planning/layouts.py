"""The chain layouts the planner considers and their estimated costs.

A layout is ``(R, c, h, d)``: a CIC decimating by ``R`` (1: none), a droop
compensating FIR decimating by ``c`` (0: none; 1: a short FIR that only reshapes
the passband), ``h`` half-bands by 2 and a final channel FIR decimating by ``d``,
optionally followed by a rational stage.  The CIC's droop is undone by the first
stage able to carry it: the compensator, else the channel FIR (half-bands may sit
between), else the rational stage's filter.

Costs are FIR multiplies per input sample from Herrmann's length estimate; the
ripple budget is shared between the stages in proportion to their estimated cost,
which minimises the total when a length grows as ``log(1/delta)`` (Lagrange
condition ``c_i / delta_i`` equal for every stage).

References
----------
O. Herrmann, L. R. Rabiner and D. S. K. Chan, "Practical design rules for optimum
finite impulse response low-pass digital filters", BSTJ 52(6), 1973.
R. E. Crochiere and L. R. Rabiner, "Interpolation and decimation of digital
signals -- a tutorial review", Proc. IEEE 69(3):300-331, 1981.
"""

import math

from .design import herrmann_length

__all__ = ["layouts", "stage_estimates", "carrier", "ripple_shares", "describe", "HALFBAND_DELTA_SHARE"]

#: Largest decimation tried for a separate compensating FIR.
MAX_COMPENSATOR_DECIMATION = 16
#: Share of the ripple budget a half-band may take at most (its ripple equals its
#: stopband deviation, usually far smaller).
HALFBAND_DELTA_SHARE = 0.25


def divisors(n):
    small = [d for d in range(1, int(math.isqrt(n)) + 1) if n % d == 0]
    return sorted(set(small + [n // d for d in small]))


def _twos(n):
    k = 0
    while n % 2 == 0 and n > 1:
        n //= 2
        k += 1
    return k


def layouts(d_int, fs, prot):
    """Every ``(R, c, h, d)`` for an integer decimation ``d_int``."""
    out = []
    for r in divisors(d_int):
        if r != 1 and r < 4:
            continue
        rest = d_int // r
        if r > 1 and prot >= fs / r / 4:
            continue
        comps = (0,) if r == 1 else (0,) + tuple(c for c in divisors(rest) if c <= MAX_COMPENSATOR_DECIMATION)
        for c in comps:
            rest_c = rest // (c if c else 1)
            for h in range(0, _twos(rest_c) + 1):
                if c > 1 and c == rest:
                    continue  # the same chain as a channel FIR carrying the compensation
                out.append((r, c, h, rest_c // 2**h))
    return out


def has_final(layout, *, resampler, edge):
    """Does the layout end in a channel FIR?"""
    return layout[3] > 1 or (edge is not None and not resampler)


def carrier(layout, *, resampler, edge):
    """Which stage undoes the CIC droop: 'comp', 'final', 'res' or None."""
    r, c = layout[0], layout[1]
    if r == 1:
        return None
    if c:
        return "comp"
    if has_final(layout, resampler=resampler, edge=edge):
        return "final"
    if resampler:
        return "res"
    return None


def stage_estimates(layout, *, fs, fp, prot, dp, ds, edge=None, resampler=None):
    """Estimated multiplies per input sample of each FIR stage: ``{role: cost}``, None when impossible.

    Roles: 'comp', 'hb' (all half-bands together), 'final', 'res'.
    """
    r, c, h, d_f = layout
    rate = fs / r
    est = {}
    if c:
        if c == 1:
            n = 5.0
        else:
            fo = rate / c
            if fo - prot <= fp:
                return None
            n = herrmann_length(dp, ds, (fo - prot - fp) / rate)
        est["comp"] = n * rate / c / fs
        rate /= c
    hb = 0.0
    for _ in range(h):
        if prot >= rate / 4:
            return None
        n = herrmann_length(ds, ds, max(0.5 - 2 * prot / rate, 1e-6))
        hb += (n / 2 + 1) * (rate / 2) / fs
        rate /= 2
    if h:
        est["hb"] = hb
    if has_final(layout, resampler=resampler, edge=edge):
        if edge is not None and not resampler:
            n = herrmann_length(dp, ds, (edge - fp) / rate)
        else:
            fo = rate / d_f
            if fo - prot <= fp:
                return None
            n = herrmann_length(dp, ds, (fo - prot - fp) / rate)
        est["final"] = max(n, 1.0) * rate / d_f / fs
        rate /= d_f
    if resampler:
        up, down = resampler
        rate_r = rate * up
        fo = rate_r / down
        stop = edge if edge is not None else fo - prot
        if stop <= fp:
            return None
        n = herrmann_length(dp, ds, (stop - fp) / rate_r)
        est["res"] = max(n, up) / up * fo / fs
    return est


def ripple_shares(est, dp, ds, *, droop=None):
    """Peak passband deviation allowed to each role, the budget ``dp`` shared by cost.

    ``droop`` (a CIC's uncompensated droop, when no stage undoes it) is taken off
    the budget first; half-bands take ``min(ds, their share)`` each.
    """
    shares = {}
    budget = dp - (droop or 0.0)
    if budget <= 0:
        return None
    if "hb" in est:
        shares["hb"] = min(ds, HALFBAND_DELTA_SHARE * budget)
        budget -= shares["hb"]
    roles = [k for k in est if k != "hb"]
    total = sum(est[k] for k in roles)
    w = {k: max(est[k] / total if total > 0 else 0.0, 0.15) for k in roles}
    norm = sum(w.values())
    for k in roles:
        shares[k] = budget * w[k] / norm
    return shares


def describe(layout, resampler=None, edge=None):
    """Short text of a layout, e.g. ``CIC/25 > comp/2 > HB/2 > FIR/5``."""
    r, c, h, d_f = layout
    parts = []
    if r > 1:
        parts.append(f"CIC/{r}")
    if c:
        parts.append(f"comp/{c}")
    parts += ["HB/2"] * h
    if has_final(layout, resampler=resampler, edge=edge):
        parts.append(f"FIR/{d_f}")
    if resampler:
        parts.append(f"x{resampler[0]}/{resampler[1]}")
    return " > ".join(parts) if parts else "none"
