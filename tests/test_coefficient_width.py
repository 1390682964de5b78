"""Quantised coefficients: reach the rejection, or name the width that would.

Every check recomputes the response of the plan's integer taps with
scipy.signal.freqz; the width rule of thumb (about 6 dB per bit) is common practice.
"""

import re

import numpy as np
import pytest
import scipy.signal

from channelizer.errors import ChannelizerError
from channelizer.planning.coeff_search import improve_integers
from channelizer.planning.planner import plan_chain
from channelizer.planning.spec import ChainSpec


def test_100_db_with_18_bit_taps():
    spec = ChainSpec(input_rate=1e6, bandwidth=300e3, output_rate=500e3, rejection_db=100, objective="hardware")
    plan = plan_chain(spec).plan
    (st,) = plan.stages
    ints = np.asarray(st.taps) * 2.0**st.coefficient_frac_bits
    assert np.array_equal(ints, np.round(ints)) and np.max(np.abs(ints)) < 2**17
    # everything that folds onto +-150 kHz after /2: 350..500 kHz
    f = np.linspace(350e3, 500e3, 4001)
    _, h = scipy.signal.freqz(st.taps, worN=f, fs=1e6)
    assert 20 * np.log10(abs(sum(st.taps)) / np.max(np.abs(h))) >= 100


def test_local_search_never_raises_the_rounded_floor():
    # a long equiripple low-pass (scipy.signal.remez) whose rounding to 18 bits costs
    # several dB; the search keeps the sum (DC gain) and the symmetry, and never ends
    # with a higher stopband
    h = scipy.signal.remez(81, [0, 0.1, 0.2, 0.5], [1, 0], weight=[1, 100], fs=1)
    scale = 2**17 / np.max(np.abs(h)) * 0.999
    q = np.rint(h * scale).astype(np.int64)
    q2 = improve_integers(q, h * scale, bits=18)
    f = np.linspace(0.2, 0.5, 4001)

    def floor_db(x):
        return 20 * np.log10(np.max(np.abs(scipy.signal.freqz(x, worN=f, fs=1)[1])) / x.sum())

    assert q2.sum() == q.sum() and np.array_equal(q2, q2[::-1])
    assert floor_db(q2) <= floor_db(q) + 1e-9


def test_refusal_names_the_width_that_meets():
    spec = ChainSpec(input_rate=1e6, bandwidth=100e3, rejection_db=77, objective="hardware", coefficient_bits=14)
    with pytest.raises(ChannelizerError, match=r"--coefficient-bits (\d+)") as info:
        plan_chain(spec)
    bits = int(re.search(r"--coefficient-bits (\d+)", info.value.args[0]).group(1))
    assert bits > 14
    plan_chain(ChainSpec(input_rate=1e6, bandwidth=100e3, rejection_db=77, objective="hardware", coefficient_bits=bits))
