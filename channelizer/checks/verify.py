"""Tone-sweep verification: the real processor measured against the predicted response.

Every test tone is one complex exponential ``A exp(2j pi f n / fs)`` fed, on its
own, through a fresh chain built from the plan (the float processor of
:mod:`channelizer.streaming`, or the bit-true integer chain).  After the chain
has settled, the output is a sum of pure exponentials: for a chain of
decimators one, at ``fold(f, fs_out)``; behind a rational stage (up ``L``) one
per image path ``k``, at ``fold(f + k fs_r, fs_out)`` with complex amplitude
``A H_k(f) / L`` (Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed.,
2010, sec. 4.6-4.7; :mod:`channelizer.response`).  A least-squares fit of those
exponentials to the settled output gives each path's gain exactly, whatever the
number of samples, so the measured gain is compared tone by tone with
``|H_k(f)| / L`` from :func:`channelizer.planning.response.normalised_response`.

Tones
-----
* Passband: an odd grid over ``[-bw/2, bw/2]`` (so ``f = 0`` is always measured,
  the reference for the rejection) plus the frequencies of the predicted
  response's largest and smallest magnitude there, so that the measured ripple
  sees the extremes.
* Alias bands (:func:`channelizer.response.alias_intervals`): the bands are
  ranked by the largest predicted gain on a coarse grid; in the worst bands
  (all of them when there are few) the predicted worst frequency (argmax on a
  dense grid, refined by a bounded scalar search) is always measured, and the
  remaining tones are spread evenly inside the same bands.

Measurement limits
------------------
* Float path (complex64 throughout): rounding to single precision (``2**-24``
  is -144 dB) is mostly noise-like, and a fit over a few hundred samples
  averages it to about -145 dB relative to the tone.  A tone at a simple
  fraction of the input rate (a band edge such as ``bw/2``) makes the rounding
  periodic, and part of it then lands on the measured frequency itself: up to
  about -123 dB relative to the tone was measured on the example plans
  (against a float64 ``scipy.signal.upfirdn`` cascade).  ``FLOAT_FLOOR_DB``
  (-120 dB) is taken as the floor, so an attenuation of 100 dB is measured to
  within about 1 dB, and 90 dB to within about 0.3 dB.
* Bit-true path: the tone is an integer complex exponential of ``amplitude``
  times full scale (0.5 by default), checked against the response of the
  quantised taps the integers realise (``IntegerChain.quantized_stages``; the
  CIC gain is in ``output_scale``).  Without help the output word would end
  the resolution: an alias below about one output LSB (about -84 dB for a
  16-bit output and a half-scale tone) is rounded away, deterministically.  So
  seeded Gaussian dither is added to the input, sized to leave about one
  output LSB rms at the output (the chain's white-noise gain
  ``mean sum_k |H_k / L|^2``), which turns the roundings into noise that the
  fit averages: with 512 fitted samples the floor is about -105 dB for a
  16-bit output (common practice for measuring below the LSB).  The
  roundings also leave a constant offset at the output (round half up and
  Hogenauer's floor truncations); it is fitted as one more exponential at
  0 Hz, and a path that lands on 0 Hz, where the two cannot be told apart,
  gets the offset as its floor.
* Bit-true, the fit's noise is what the rounding leaves: about 27 dB below an alias at
  -80 dB, a standard error of about 0.4 dB, and the loudest of a few such tones reads
  high by about that much.  So every alias tone within three standard errors of the
  spec's level is measured again (the loudest ``REFIT_TONES``) over ``REFIT_FACTOR``
  times the samples, which divides the error by ``sqrt(REFIT_FACTOR)``; its record then
  carries that fit.
* Each tone record carries ``floor_db``: the fit's standard error (the rms
  residual over ``sqrt(N)``, one sigma), at least ``FLOAT_FLOOR_DB`` on the
  float path, relative to the tone.  When the worst alias measured is within
  6 dB of its floor, the measured rejection is not resolved
  (``floor_limited``): the true figure may be better or a little worse.
"""

from dataclasses import asdict, dataclass, field, fields
import json
import math
import numbers

import numpy as np

from ..errors import ChannelizerError
from ..units import format_hz
from ..planning.plan import Plan
from ..planning.response import fold, impulse_seconds, predict
from ..planning.stages import chain_rates
from .tones import _alias_tones, _db, _noise_gain, _passband_tones, _path_gain, _resampler

__all__ = ["ToneMeasurement", "Verification", "verify_plan"]

DEFAULT_ALIAS_TONES = 200
#: Most alias tones one verify measures (each runs a fresh chain: time grows with the count).
MAX_ALIAS_TONES = 10_000
FIT_SAMPLES = 256
BIT_TRUE_FIT_SAMPLES = 512
BIT_TRUE_AMPLITUDE = 0.5
_FLOOR_MARGIN_DB = 6.0
#: Bit-true: alias tones near the spec's level are measured again over this many times
#: the fitted samples, at most ``REFIT_TONES`` of them (see the module notes).
REFIT_FACTOR = 8
REFIT_TONES = 8
#: Coherent rounding error of the complex64 chain relative to a unit tone (see the module notes).
FLOAT_FLOOR_DB = -120.0


# ----------------------------------------------------------------------------- results
@dataclass(frozen=True)
class ToneMeasurement:
    """One test tone.

    Attributes
    ----------
    input_hz : float
        Tone frequency at the chain input, offset from the channel centre.
    image : int
        Image path of a rational stage that carries it (0: direct).
    landing_hz : float
        Where the path puts it in the output band.
    band : str
        ``'passband'`` or ``'alias'``.
    predicted_db : float
        ``20 log10 |H_image(input_hz)| / L``: the gain the plan predicts.
    measured_db : float
        ``20 log10 (|a| / amplitude)``, ``a`` the fitted complex amplitude.
    floor_db : float
        Measurement floor for this tone relative to the tone (see the module notes).
    band_worst : bool
        The tone is its alias band's predicted worst frequency.
    """

    input_hz: float
    image: int
    landing_hz: float
    band: str
    predicted_db: float
    measured_db: float
    floor_db: float
    band_worst: bool = False


@dataclass(frozen=True)
class Verification:
    """Tone-sweep result for one plan.

    Attributes
    ----------
    input_rate, output_rate, bandwidth : float
        Hz, as in the plan.
    tones : tuple of ToneMeasurement
        Passband tones first, then alias tones in the order of their bands' rank.
    measured_ripple_db : float
        Max minus min measured gain over the passband tones.
    measured_rejection_db : float
        Measured gain at 0 Hz minus the largest measured alias gain (``inf`` when
        nothing folds onto the passband).
    worst_alias_hz, worst_alias_image : float, int
        Input frequency and image path of that largest alias.
    predicted_ripple_db, predicted_rejection_db, predicted_worst_alias_hz : float
        Recomputed with :func:`channelizer.response.predict` from ``stages``.
    predicted_rejection_at_tones_db : float
        The same figure as ``measured_rejection_db`` from the predicted gains of
        the tones actually measured.
    plan_predicted : dict
        ``passband_ripple_db`` and ``alias_rejection_db`` as the plan file states them.
    spec_ripple_db, spec_rejection_db : float
        The plan's targets.
    meets_spec : bool
        ``measured_ripple_db <= spec_ripple_db`` and
        ``measured_rejection_db >= spec_rejection_db``.
    floor_limited : bool
        The worst alias measured lies within 6 dB of its measurement floor, so
        ``measured_rejection_db`` is not resolved (see the module notes).
    max_passband_error_db : float
        Largest ``|measured - predicted|`` over the passband tones.
    bit_true : bool
    amplitude : float
        Tone amplitude (1.0 on the float path; fraction of full scale bit-true).
    alias_bands, alias_bands_tested : int
        Bands that fold onto the passband, and how many of them were swept.
    settle_samples, fit_samples : int
        Output samples discarded while the chain settles, and fitted.
    seed : int
    plan_sha256 : str
        Identity of the plan verified (:meth:`channelizer.plan.Plan.identity`).
    stages : tuple
        The stages whose response was predicted (bit-true: with the quantised
        taps the integers realise); not written to JSON.
    """

    input_rate: float
    output_rate: float
    bandwidth: float
    bit_true: bool
    tones: tuple
    measured_ripple_db: float
    measured_rejection_db: float
    worst_alias_hz: float
    worst_alias_image: int
    predicted_ripple_db: float
    predicted_rejection_db: float
    predicted_worst_alias_hz: float
    predicted_rejection_at_tones_db: float
    plan_predicted: dict
    spec_ripple_db: float
    spec_rejection_db: float
    meets_spec: bool
    floor_limited: bool
    max_passband_error_db: float
    amplitude: float
    alias_bands: int
    alias_bands_tested: int
    settle_samples: int
    fit_samples: int
    seed: int = 0
    plan_sha256: str = ""
    ripple_uncertainty_db: float = 0.0
    dc_spur_dbfs: float | None = None
    stages: tuple = field(default=(), repr=False, compare=False)

    @property
    def verdict(self):
        """``'meets'``, ``'does not meet'``, or ``'inconclusive'``.

        Inconclusive: a figure misses the spec only by what the measurement's own
        floor can hide (the worst alias within 6 dB of its floor, the ripple
        within its three-sigma uncertainty), and nothing misses it beyond that.
        """
        if self.meets_spec:
            return "meets"
        ripple_misses = self.measured_ripple_db - self.ripple_uncertainty_db > self.spec_ripple_db
        rejection_misses = self.measured_rejection_db < self.spec_rejection_db and not self.floor_limited
        return "does not meet" if ripple_misses or rejection_misses else "inconclusive"

    @property
    def passband(self):
        """The passband tones."""
        return tuple(t for t in self.tones if t.band == "passband")

    @property
    def aliases(self):
        """The alias tones."""
        return tuple(t for t in self.tones if t.band == "alias")

    def to_dict(self):
        """Plain types only; infinities and NaN become ``None``."""
        d = {"format": "channelizer-verification/1"}
        for f in fields(self):
            if f.name != "stages":
                d[f.name] = getattr(self, f.name)
        d["tones"] = [asdict(t) for t in self.tones]
        d["plan_predicted"] = dict(self.plan_predicted)
        d["verdict"] = self.verdict
        return _finite(d)

    def to_json(self, *, indent=1):
        """JSON text of :meth:`to_dict` (strict JSON: no ``Infinity``/``NaN``)."""
        return json.dumps(self.to_dict(), indent=indent, allow_nan=False) + "\n"

    def summary_lines(self):
        """A few lines of text: measured beside predicted and the verdict."""
        def db(x):
            return "n/a" if x is None or not math.isfinite(x) else f"{x:.3f} dB"

        bound = " (floor-limited: at least)" if self.floor_limited else ""
        return [
            f"tones: {len(self.passband)} passband, {len(self.aliases)} alias in "
            f"{self.alias_bands_tested} of {self.alias_bands} folding bands"
            f"{' (bit-true)' if self.bit_true else ''}",
            f"passband ripple: measured {db(self.measured_ripple_db)}, predicted {db(self.predicted_ripple_db)}, "
            f"spec {db(self.spec_ripple_db)}; largest tone error {db(self.max_passband_error_db)}",
            f"alias rejection: measured {db(self.measured_rejection_db)}{bound} at {format_hz(self.worst_alias_hz, signed=True)} "
            f"({'alias' if self.worst_alias_image == 0 else f'image path {self.worst_alias_image} of the rational stage'}), predicted {db(self.predicted_rejection_db)}, spec {db(self.spec_rejection_db)}",
        ] + ([f"DC spur: {self.dc_spur_dbfs:.1f} dBFS at 0 Hz (offset of the integer path's roundings; "
               "taken out of tones landing there, not counted as an alias)"]
             if self.dc_spur_dbfs is not None else []) + [
            f"verdict: {self.verdict_text()}",
        ]

    def verdict_text(self):
        """The verdict in words; an inconclusive one says why."""
        if self.verdict == "inconclusive":
            return ("inconclusive: the measurement's own noise floor is above what the spec asks "
                    "(see floor_db); it neither meets nor misses the spec")
        return f"{self.verdict} the spec"


def _finite(obj):
    if isinstance(obj, dict):
        return {k: _finite(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_finite(v) for v in obj]
    if isinstance(obj, (np.floating, float)):
        x = float(obj)
        return x if math.isfinite(x) else None
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj


# ----------------------------------------------------------------------------- geometry


# ----------------------------------------------------------------------------- running tones
def _tone(ratio, n, phase):
    """``exp(2j pi (ratio k + phase))`` for ``k < n`` as complex128, by an outer product of two tables."""
    T = 4096
    rows = -(-n // T)
    col = np.exp(2j * np.pi * np.mod(ratio * np.arange(T, dtype=np.float64), 1.0))
    start = np.mod(ratio * T * np.arange(rows, dtype=np.float64) + phase, 1.0)
    row = np.exp(2j * np.pi * start)
    return (row[:, None] * col[None, :]).ravel()[:n]


class _FloatRunner:
    """Complex64 tones through a fresh float chain each."""

    lsb = 0.0

    def __init__(self, plan, amplitude):
        from ..engines.float_chain import build_chain

        self.amplitude = amplitude
        self._plan = plan
        self._build = build_chain
        self.stages = plan.stages

    def run(self, ratio, n, phase, rng):
        chain = self._build(self._plan.stages, offset=0.0, fs=self._plan.input_rate)
        x = (_tone(ratio, n, phase) * self.amplitude).astype(np.complex64)
        return chain.process(x).astype(np.complex128)


class _IntegerRunner:
    """Integer tones of ``amplitude`` times full scale through the bit-true chain, reset before each."""

    def __init__(self, plan, amplitude):
        try:
            from ..engines.integer_chain import IntegerChain
        except ImportError as exc:
            raise ChannelizerError(f"bit_true: the integer chain is not available ({exc})") from None
        bits = int(plan.spec["bits"]["input"])
        self._full = 2 ** (bits - 1)
        self._peak = int(round(amplitude * self._full))
        if not 1 <= self._peak <= self._full - 1:
            raise ChannelizerError(f"amplitude: {amplitude!r} of full scale gives no usable {bits}-bit tone")
        self.amplitude = self._peak / self._full
        self._chain = IntegerChain.from_plan(plan, offset=0.0, fs=plan.input_rate)
        # the response the integers realise: quantised taps; the CIC gain sits in output_scale
        self.stages = tuple(self._chain.quantized_stages)
        self.lsb = float(self._chain.output_scale)
        self.dither = 0.0  # rms per rail in input LSBs, set by the caller

    def run(self, ratio, n, phase, rng):
        self._chain.reset()
        z = _tone(ratio, n, phase) * self._peak
        x = np.empty((n, 2), dtype=np.int64)
        x[:, 0] = np.rint(z.real + rng.normal(0.0, self.dither, n) if self.dither else z.real)
        x[:, 1] = np.rint(z.imag + rng.normal(0.0, self.dither, n) if self.dither else z.imag)
        np.clip(x, -self._full, self._full - 1, out=x)
        y = np.asarray(self._chain.process(x))
        return (y[:, 0] + 1j * y[:, 1]) * self.lsb


def _fit(y, freqs, *, fs_out, start, dc=False):
    """Least-squares complex amplitudes of ``exp(2j pi f n / fs_out)``, ``n`` counted from 0 at the first output.

    With ``dc`` a constant is fitted too (its amplitude comes last).  Returns the
    amplitudes and the fit's standard error (rms residual / sqrt(N)).
    """
    n = start + np.arange(y.size, dtype=np.float64)
    freqs = np.concatenate([np.asarray(freqs, dtype=float), [0.0] if dc else []])
    E = np.exp(2j * np.pi * np.mod(np.outer(n, freqs / fs_out), 1.0))
    if E.shape[1] == 1:
        e = E[:, 0]
        a = np.array([np.vdot(e, y) / y.size])
    else:
        a = np.linalg.lstsq(E, y, rcond=None)[0]
    resid = y - E @ a
    err = math.sqrt(float(np.vdot(resid, resid).real) / y.size) / math.sqrt(y.size)
    return a, err


def _check_count(value, name, *, low=1, high=None):
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < low:
        raise ChannelizerError(f"{name}: expected an integer of at least {low}, got {value!r}")
    if high is not None and value > high:
        raise ChannelizerError(f"{name}: {value} is more than the {high} allowed (each runs its own chain)")
    return int(value)


# ----------------------------------------------------------------------------- public
def verify_plan(plan, *, bit_true=False, tones=None, seed=0, fit_samples=None, amplitude=None):
    """Measure a plan's chain with test tones and compare with its predicted response.

    Parameters
    ----------
    plan : channelizer.plan.Plan
    bit_true : bool, optional
        Run the bit-true integer chain (``IntegerChain.from_plan``) on integer
        tones instead of the complex64 float chain.
    tones : int, optional
        Alias tones in all (default 200); the passband always gets 17 grid tones
        and the two extremes of its predicted response.
    seed : int, optional
        Seeds the tones' random starting phases and the bit-true dither
        (``numpy.random.default_rng``).
    fit_samples : int, optional
        Settled output samples fitted per tone (default 256 on the float path,
        512 bit-true).
    amplitude : float, optional
        Tone amplitude as a fraction of full scale, in (0, 1]: default 0.5
        bit-true (rounded to an integer peak below full scale), 1.0 on the
        float path.

    Returns
    -------
    Verification

    Raises
    ------
    ChannelizerError
        A bad option, or (bit-true) a plan the integer model cannot build.

    Notes
    -----
    Each tone runs through its own fresh chain for ``S + fit_samples`` output
    samples, ``S`` the impulse response length in output samples plus two;
    the cost is about ``(S + fit_samples) fs / fs_out`` input samples per tone.
    See the module docstring for the measurement floors.

    References
    ----------
    A. V. Oppenheim and R. W. Schafer, *Discrete-Time Signal Processing*, 3rd ed.,
    2010, sec. 4.6-4.7 (down-sampling, up-sampling and their spectra).
    S. M. Kay, *Fundamentals of Statistical Signal Processing: Estimation Theory*,
    1993, ch. 8 (least squares; amplitude of a sinusoid in noise), from memory.
    """
    if not isinstance(plan, Plan):
        raise ChannelizerError(f"plan: expected a Plan, got {type(plan).__name__}")
    if not isinstance(bit_true, bool):
        raise ChannelizerError(f"bit_true: expected True or False, got {bit_true!r}")
    n_alias = DEFAULT_ALIAS_TONES if tones is None else _check_count(tones, "tones", high=MAX_ALIAS_TONES)
    if fit_samples is None:
        fit_samples = BIT_TRUE_FIT_SAMPLES if bit_true else FIT_SAMPLES
    fit_samples = _check_count(fit_samples, "fit_samples", low=16)
    seed = _check_count(seed, "seed", low=0)
    if amplitude is not None and (
        isinstance(amplitude, bool) or not isinstance(amplitude, numbers.Real) or not 0 < amplitude <= 1
    ):
        raise ChannelizerError(f"amplitude: expected a fraction of full scale in (0, 1], got {amplitude!r}")
    fs = float(plan.input_rate)
    if bit_true:
        runner = _IntegerRunner(plan, BIT_TRUE_AMPLITUDE if amplitude is None else float(amplitude))
    else:
        runner = _FloatRunner(plan, 1.0 if amplitude is None else float(amplitude))
    stages = runner.stages
    fs_out = chain_rates(stages, fs=fs)[-1]
    up, fs_r = _resampler(stages, fs)

    settle = int(math.ceil(impulse_seconds(stages, fs=fs) * fs_out)) + 2

    plan_tones = [(f, k, w, "passband") for f, k, w in _passband_tones(stages, fs, plan.bandwidth, up)]
    alias, n_bands, n_tested = _alias_tones(stages, fs, plan.bandwidth, up, n_alias)
    plan_tones += [(f, k, w, "alias") for f, k, w in alias]

    rng = np.random.default_rng(seed)
    phases = rng.random(len(plan_tones))
    amp = runner.amplitude
    if bit_true:
        # dither of about one output LSB rms makes the output rounding noise-like, so
        # that the fit averages it (common practice); in input LSBs per rail
        runner.dither = runner.lsb / math.sqrt(_noise_gain(stages, fs, up)) * 2.0 ** (plan.spec["bits"]["input"] - 1)
        floor_abs = 0.0
    else:
        floor_abs = amp * 10.0 ** (FLOAT_FLOOR_DB / 20.0)
    # a path that lands this close to 0 Hz cannot be told from an offset at the output
    near_dc = 2.0 * fs_out / fit_samples
    rows, offsets, on_dc_runs = [], [], []

    def measure(f, k, phase, fit):
        """Run one tone and fit ``fit`` settled outputs.

        Returns the outputs, the distinct landing frequencies, the index into them of
        each image path, the fitted amplitudes, the fit's standard error, and whether
        an offset was fitted too.
        """
        want = settle + fit
        n = int(math.ceil((want + 1) * fs / fs_out)) + 1  # one spare output against rounding of the rates
        y = runner.run(f / fs, n, phase, rng)
        if y.size < want:
            raise ChannelizerError(f"chain gave {y.size} outputs for {n} inputs, expected {want}")
        y = y[settle:want]
        lands = fold(f + np.arange(up) * fs_r, fs_out)
        # paths landing on the same frequency add up; fit each distinct frequency once
        key = np.round(lands / fs_out * 2**32).astype(np.int64)
        uniq, inverse = np.unique(key, return_inverse=True)
        freqs = np.array([lands[inverse == u][0] for u in range(uniq.size)])
        # the integer chain's roundings leave a constant offset: fit it where it can be told apart
        sep = bool(np.min(np.abs(freqs)) > near_dc)
        a, err = _fit(y, freqs, fs_out=fs_out, start=settle, dc=bit_true and sep)
        return y, freqs, inverse, a, err, sep

    for (f, k, worst, band), phase in zip(plan_tones, phases):
        y, freqs, inverse, a, err, sep = measure(f, k, phase, fit_samples)
        if bit_true and sep:
            offsets.append(complex(a[-1]))
        u = int(inverse[k])
        same = np.flatnonzero(inverse == u)
        h = sum(_path_gain(stages, np.array([f]), fs=fs, image=int(j), up=up)[0] for j in same)
        dc_landing = abs(freqs[u]) <= near_dc
        if bit_true and dc_landing:
            on_dc_runs.append((len(rows), y, freqs, u))
        rows.append([f, k, float(freqs[u]), band, abs(h), abs(a[u]), max(err, floor_abs), worst, dc_landing, phase])
    # The offset is a DC spur of the integer path, not an alias: a tone landing next to
    # 0 Hz is fitted again with the offset measured on all the other tones taken out,
    # and the offset's own uncertainty (its spread over sqrt(n) tones) is that tone's floor.
    dc_spur = complex(np.median(np.real(offsets)), np.median(np.imag(offsets))) if offsets else 0j
    spur_err = float(np.std(offsets) / math.sqrt(len(offsets))) if len(offsets) > 1 else abs(dc_spur)
    for i, y, freqs, u in on_dc_runs:
        a, err = _fit(y - dc_spur, freqs, fs_out=fs_out, start=settle)
        rows[i][5], rows[i][6] = abs(a[u]), max(err, floor_abs)
    if bit_true:
        # An alias tone within three standard errors of the spec's level could pass or fail on
        # the chain's rounding noise rather than its response: measure the loudest few again
        # over REFIT_FACTOR times the samples (the error falls by its square root; least
        # squares, Kay 1993, ch. 8), so the verdict rests on the response.
        dc_amp = next(r[5] for r in rows if r[3] == "passband" and r[0] == 0.0)
        level = dc_amp * 10.0 ** (-float(plan.spec["rejection_db"]) / 20.0)
        close = [i for i, r in enumerate(rows) if r[3] == "alias" and not r[8] and r[5] + 3.0 * r[6] >= level]
        for i in sorted(close, key=lambda i: -rows[i][5])[:REFIT_TONES]:
            f, k, phase = rows[i][0], rows[i][1], rows[i][9]
            _, _, inverse, a, err, _ = measure(f, k, phase, fit_samples * REFIT_FACTOR)
            rows[i][5], rows[i][6] = abs(a[int(inverse[k])]), err
    offset = spur_err
    records = [
        ToneMeasurement(
            input_hz=float(f),
            image=int(k),
            landing_hz=land,
            band=band,
            predicted_db=_db(h),
            measured_db=_db(a / amp),
            floor_db=_db(max(err, offset if on_dc else 0.0) / amp),
            band_worst=bool(worst),
        )
        for f, k, land, band, h, a, err, worst, on_dc, _ in rows
    ]

    pb = [r for r in records if r.band == "passband"]
    al = [r for r in records if r.band == "alias"]
    pm = np.array([r.measured_db for r in pb])
    ripple = float(pm.max() - pm.min())
    dc = next(r for r in pb if r.input_hz == 0.0)
    pb_err = float(max(abs(r.measured_db - r.predicted_db) for r in pb))
    # each passband gain is known to 3 sigma of its fit: the ripple to twice that (common practice)
    ripple_unc = 2.0 * 20.0 * math.log10(1.0 + 3.0 * 10.0 ** (max(r.floor_db for r in pb) / 20.0))
    if al:
        w = max(al, key=lambda r: r.measured_db)
        rejection = dc.measured_db - w.measured_db
        worst_hz, worst_img = w.input_hz, w.image
        floor_limited = w.measured_db <= w.floor_db + _FLOOR_MARGIN_DB
        rej_at_tones = dc.predicted_db - max(r.predicted_db for r in al)
    else:
        rejection, worst_hz, worst_img, floor_limited, rej_at_tones = math.inf, math.nan, 0, False, math.inf
    pred = predict(stages, fs=fs, bandwidth=plan.bandwidth)
    spec_ripple = float(plan.spec["ripple_db"])
    spec_rej = float(plan.spec["rejection_db"])
    sha = plan.identity()
    return Verification(
        input_rate=fs,
        output_rate=float(fs_out),
        bandwidth=float(plan.bandwidth),
        bit_true=bit_true,
        tones=tuple(records),
        measured_ripple_db=ripple,
        measured_rejection_db=float(rejection),
        worst_alias_hz=float(worst_hz),
        worst_alias_image=int(worst_img),
        predicted_ripple_db=pred.passband_ripple_db,
        predicted_rejection_db=pred.alias_rejection_db,
        predicted_worst_alias_hz=pred.worst_alias_hz,
        predicted_rejection_at_tones_db=float(rej_at_tones),
        plan_predicted={
            k: float(plan.predicted[k]) for k in ("passband_ripple_db", "alias_rejection_db") if k in plan.predicted
        },
        spec_ripple_db=spec_ripple,
        spec_rejection_db=spec_rej,
        meets_spec=bool(ripple <= spec_ripple and rejection >= spec_rej),
        floor_limited=bool(floor_limited),
        max_passband_error_db=pb_err,
        amplitude=float(amp),
        alias_bands=int(n_bands),
        alias_bands_tested=int(n_tested),
        settle_samples=int(settle),
        fit_samples=int(fit_samples),
        seed=int(seed),
        plan_sha256=sha,
        ripple_uncertainty_db=float(ripple_unc),
        dc_spur_dbfs=(20.0 * math.log10(abs(dc_spur)) if abs(dc_spur) > 0 else None) if bit_true else None,
        stages=tuple(stages),
    )


