"""Apply plans to a capture: one read of the file, every channel's chain, one recording each.

Flow: the capture reader yields blocks; each channel's chain (float runners from
:mod:`channelizer.streaming`, or the bit-true integer chain) turns them into
output samples; a SigMF writer per channel streams them to a temporary file that
is renamed only when the whole run has succeeded.  Spectra for the plots are
accumulated on the way, so the file is read once.
"""

from dataclasses import dataclass, field
import contextlib
import hashlib
import json
import math
import os
import time

import numpy as np

from ..io.atomic import FileSet, write_text_atomic
from ..errors import ChannelizerError
from ..io.names import check_output_names, safe_output_name
from ..dsp.spectrum import _segment_length
from ..dsp.spaced_welch import SpacedWelch
from ..planning.response import impulse_seconds
from ..planning.stages import chain_rates
from ..io.progress import ProgressBar
from ..io.read_ahead import read_ahead
from ..units import format_hz
from .timing import channel_timing

__all__ = ["ChannelRequest", "ChannelResult", "ExtractResult", "extract_channels", "plan_identity", "chain_delay_output_samples"]

DEFAULT_BLOCK = 1 << 20
#: Segments of the overview spectrum, spread evenly over the capture (see dsp/spaced_welch.py):
#: a Welch bin's spread 10 log10(1 + 1/sqrt(256)) = 0.26 dB, ample for finding signals 10 dB
#: above the floor; on 1 s of 61.44 Msps their transforms (16384 points for a 200 kHz channel)
#: took as long as reading and converting the capture, so 512 made the reading thread the slower one.
OVERVIEW_SEGMENTS = 256
#: Segments of each channel's output spectrum: the ordinary half-overlapped Welch average while
#: the output holds fewer (about 256 x 2048 samples), the same budget spread over longer outputs,
#: so that the spectra of an hour's run cost what those of a minute's do.
OUTPUT_SEGMENTS = 256
#: Largest block: each channel holds a few arrays of this many samples.
MAX_BLOCK = 1 << 24
#: The files a run writes for itself, and those each channel NAME writes (NAME + suffix).
RUN_FILES = ("summary.json", "overview.png")
CHANNEL_SUFFIXES = (".sigmf-data", ".sigmf-meta", ".png")


def plan_identity(data):
    """Identity of a plan file: SHA-256 of its bytes."""
    return hashlib.sha256(data).hexdigest()


@dataclass
class ChannelRequest:
    """One channel to extract.

    Attributes
    ----------
    name : str
        Output base name (checked by :func:`channelizer.names.safe_output_name`).
    offset : float
        Channel centre minus capture centre, Hz.
    plan : Plan
    plan_id : str
        Identity of the plan file (see :func:`plan_identity`).
    plan_source : str
        Where the plan came from, for the metadata.
    """

    name: str
    offset: float
    plan: object
    plan_id: str = ""
    plan_source: str = ""


@dataclass
class ChannelResult:
    name: str
    offset: float
    center_frequency: float | None
    output_rate: float
    samples: int
    mean_power_dbfs: float
    group_delay_output_samples: float
    plan_id: str
    files: list
    clipped: int = 0
    peak: float = 0.0  # largest |I| or |Q| at the output, full scale 1
    settled_from: int = 0  # output sample the mean power starts at (the chain's length)
    spectrum: object = None
    alias_audit: list = field(default_factory=list)
    timing: object = None


@dataclass
class ExtractResult:
    capture: object
    channels: list
    input_samples: int
    seconds: float
    overview: object = None
    summary_path: str = ""
    warnings: list = field(default_factory=list)


def chain_delay_output_samples(stages, *, fs):
    """Group delay of a chain in output samples (linear-phase stages: (L-1)/2 each)."""
    rates = chain_rates(stages, fs=fs)
    delay_in = sum(st.delay * fs / rate for st, rate in zip(stages, rates))
    return delay_in * rates[-1] / fs


def check_channel(capture, req):
    """Refuse a channel whose rate or band does not fit the capture."""
    plan = req.plan
    fs = capture.sample_rate
    if not math.isclose(fs, plan.input_rate, rel_tol=1e-9):
        raise ChannelizerError(
            f"channel {req.name}: the capture {capture.path} runs at {format_hz(fs, 'sps')} but its plan"
            f"{' ' + str(req.plan_source) if req.plan_source else ''} expects {format_hz(plan.input_rate, 'sps')}"
        )
    half = plan.bandwidth / 2.0
    if abs(req.offset) + half > fs / 2.0:
        where = capture.center_frequency
        span = (
            f"{format_hz(where - fs / 2)} to {format_hz(where + fs / 2)}"
            if where is not None
            else f"{format_hz(-fs / 2)} to {format_hz(fs / 2, signed=True)} offset"
        )
        raise ChannelizerError(
            f"channel {req.name}: passband {format_hz(req.offset - half, signed=True)} to {format_hz(req.offset + half, signed=True)} from centre "
            f"leaves the captured band ({span})"
        )


def check_requests(capture, requests, *, bit_true=False, block_size=DEFAULT_BLOCK):
    """Refuse a run that cannot be done (names, rates, bands, block size); returns the output names."""
    if isinstance(block_size, bool) or not isinstance(block_size, int) or not 1 <= block_size <= MAX_BLOCK:
        raise ChannelizerError(f"block size {block_size!r} must be a whole number of samples from 1 to {MAX_BLOCK}")
    if not requests:
        raise ChannelizerError("no channel to extract: give --channel NAME=FREQ or --channels FILE")
    names = [safe_output_name(r.name) for r in requests]
    check_output_names(names, suffixes=CHANNEL_SUFFIXES, reserved=RUN_FILES)
    for r in requests:
        check_channel(capture, r)
    if bit_true and not capture.datatype.is_integer:
        raise ChannelizerError(f"{capture.path}: --bit-true needs an integer capture, this one is {capture.datatype.name}")
    return names


def _prepare_out_dir(out_dir):
    if os.path.exists(out_dir) and not os.path.isdir(out_dir):
        raise ChannelizerError(f"{out_dir}: exists and is not a folder")
    try:
        os.makedirs(out_dir, exist_ok=True)
    except OSError as exc:
        raise ChannelizerError(f"{out_dir}: cannot create output folder ({exc.strerror})") from None


def _dbfs(power):
    return 10.0 * math.log10(power) if power > 0 else -math.inf


def _integer_chain(req, capture):
    from ..engines.integer_chain import IntegerChain

    return IntegerChain.from_plan(req.plan, offset=req.offset, fs=capture.sample_rate)


def extract_channels(
    capture,
    requests,
    out_dir,
    *,
    output_format="cf32_le",
    bit_true=False,
    block_size=None,
    nonfinite="error",
    progress=False,
    spectra=True,
    channel_spectra=None,
    fileset=None,
    trim_settling=False,
    audit_resolution=None,
    engine=None,
    runner=None,
    read_ahead=True,
):
    """Extract every requested channel from ``capture`` in one pass.

    Parameters
    ----------
    capture : channelizer.captures.Capture
    requests : list of ChannelRequest
    out_dir : str
        Folder for ``NAME.sigmf-data``/``NAME.sigmf-meta`` and ``summary.json``.
    output_format : {'cf32_le', 'ci16_le'}
    bit_true : bool
        Run the integer chain (NCO, pruned CIC, quantised FIRs) on the raw integers.
    block_size : int, optional
        Input samples read at a time; the output does not depend on it (beyond
        float rounding).  By default about ``DEFAULT_BLOCK``, a multiple of every
        chain's period, so that a distributed run can match this pass bit for bit.
    nonfinite : {'error', 'zero'}
        What to do with NaN or infinite samples in a float capture.
    progress : bool
        Show a progress bar on stderr (when it is a terminal).
    spectra : bool
        Accumulate the input spectrum (for the alias audit and the overview plot)
        and, unless ``channel_spectra`` says otherwise, each channel's output
        spectrum (for its plot).
    channel_spectra : bool, optional
        Accumulate each channel's output spectrum (``ChannelResult.spectrum``); by
        default as ``spectra``.  The audit reads only the input spectrum, so a run
        without plots leaves these out.
    fileset : channelizer.atomic.FileSet, optional
        Leave the recordings uncommitted in this set (the caller adds the summary
        and commits, so that all outputs of a run appear together); by default
        they are committed here once every channel is complete.
    trim_settling : bool
        Leave out each channel's start-up samples (see :mod:`channelizer.run.timing`);
        otherwise they are written and marked by an annotation.
    audit_resolution : float, optional
        Bin spacing in Hz of the input spectrum the alias audit reads; by default
        chosen from the channels' bandwidths (:func:`channelizer.checks.alias_audit.audit_resolution`).
    engine : object, optional
        Float runner for all channels at once (``process(block)`` returning one
        array per request, in order), e.g. a filter bank; by default the
        requests' own chains, first stages shared where they can be.
    runner : callable, optional
        ``runner(pass_, out_dir, files, output_format=..., nonfinite=...,
        progress=...)`` does the reading and writing in place of this process
        (the distributed runner of :mod:`channelizer.run.distributed`).
    read_ahead : bool
        Read, convert and feed the overview spectrum one block ahead on a second
        thread while the chains run (:mod:`channelizer.io.read_ahead`); False
        keeps the pass on one thread.  The outputs are the same either way.

    Returns
    -------
    ExtractResult
    """
    if block_size is None and requests:
        from .chunks import aligned_block_size

        block_size = aligned_block_size([r.plan.stages for r in requests], DEFAULT_BLOCK)
    names = check_requests(capture, requests, bit_true=bit_true, **({} if block_size is None else {"block_size": block_size}))
    _prepare_out_dir(out_dir)
    one = _Pass(capture, requests, names, bit_true=bit_true, block_size=block_size, spectra=spectra,
                channel_spectra=channel_spectra,
                audit_resolution=audit_resolution, engine=engine, read_ahead=read_ahead)
    one.timing = [channel_timing(r.plan.stages, fs=capture.sample_rate, trim=trim_settling) for r in requests]
    own_set = fileset is None
    files = FileSet() if own_set else fileset
    t0 = time.perf_counter()
    try:
        run = one.run if runner is None else (lambda *a, **k: runner(one, *a, **k))
        run(out_dir, files, output_format=output_format, nonfinite=nonfinite, progress=progress)
        if own_set:
            files.commit()  # every recording appears together, or none does
    except BaseException:
        if own_set:
            files.abort()
        raise
    return one.result(time.perf_counter() - t0)


class _Pass:
    """One read of a capture through every channel's chain, with its accumulators."""

    def __init__(self, capture, requests, names, *, bit_true, block_size, spectra, channel_spectra=None,
                 audit_resolution=None, engine=None, start_index=0, read_ahead=True):
        self.capture, self.requests, self.names = capture, requests, names
        self.bit_true, self.block_size, self.read_ahead = bit_true, block_size, bool(read_ahead)
        fs = capture.sample_rate
        centre = capture.center_frequency or 0.0
        if bit_true:
            self.runners = [_integer_chain(r, capture) for r in requests]
            for runner in self.runners:
                runner.seek(start_index)  # first sample fed is the capture's sample start_index
        elif engine is not None:
            self.bank = engine
        else:
            # channels sharing a first stage share its matrix product
            from ..engines.float_chain import SharedFrontBank

            self.bank = SharedFrontBank([(r.plan.stages, r.offset) for r in requests], fs=fs, start_index=start_index)
        n_total = capture.num_samples
        if audit_resolution is None:
            from ..checks.alias_audit import audit_resolution as default_resolution

            audit_resolution = default_resolution([r.plan.bandwidth for r in requests], fs=fs, samples=n_total)
        # a fixed budget of contiguous segments spread over the file: the audit's resolution at a
        # fraction of the chain's cost however long the capture (see dsp/spaced_welch.py)
        nperseg = _segment_length(fs, audit_resolution, None)
        self.overview = (SpacedWelch(fs=fs, nperseg=nperseg, total=n_total, segments=OVERVIEW_SEGMENTS,
                                     center_frequency=centre) if spectra else None)
        channel_spectra = spectra if channel_spectra is None else bool(channel_spectra)
        self.out_spectra = []
        for r in requests:
            n_out = int(n_total * r.plan.output_rate / fs)
            nper = 1 << max(4, min(12, int(math.log2(max(n_out // 8, 16)))))
            ok = channel_spectra and n_out >= nper
            self.out_spectra.append(
                SpacedWelch(fs=r.plan.output_rate, nperseg=nper, total=n_out, segments=OUTPUT_SEGMENTS,
                            center_frequency=centre + r.offset) if ok else None
            )
        self.power = [0.0] * len(requests)  # over the settled outputs
        self.count = [0] * len(requests)
        # the mean power skips the chain's start-up: its impulse response length in outputs
        self.settle = [int(math.ceil(impulse_seconds(r.plan.stages, fs=fs) * r.plan.output_rate)) for r in requests]
        self.peak = [0.0] * len(requests)
        self.writers = []

    def _raw_integers(self, block):
        """A bit-true block's integers as int64, offset binary made signed."""
        raw = block.astype(np.int64)
        if self.capture.datatype.kind == "u":
            raw = raw - (1 << (self.capture.datatype.bits - 1))
        return raw

    def _add_to_overview(self, block):
        """Feed one input block, as read, to the overview spectrum."""
        if not self.bit_true:
            self.overview.update(block)
        elif self.overview.needs(block.shape[0]):
            raw = self._raw_integers(block)
            scale_in = np.float32(2.0 ** (self.capture.datatype.bits - 1))
            self.overview.update((raw[:, 0] + 1j * raw[:, 1]).astype(np.complex64) / scale_in)
        else:
            self.overview.skip(block.shape[0])

    def _outputs(self, i, block):
        """Every channel's output for one input block (complex64, full-scale units)."""
        if not self.bit_true:
            return self.bank.process(block)
        raw = self._raw_integers(block)
        outs = []
        for runner in self.runners:
            y = runner.process(raw)
            outs.append((y[:, 0] + 1j * y[:, 1]).astype(np.complex64) * np.float32(runner.output_scale))
        return outs

    def open_writers(self, stack, out_dir, files, output_format):
        """One SigMF writer per channel, entered on ``stack``, left uncommitted in ``files``."""
        from ..io.sigmf_writer import SigmfWriter

        cap = self.capture
        centre = cap.center_frequency
        self._skip = [t.skipped for t in self.timing]
        for r, name, timing in zip(self.requests, self.names, self.timing):
            meta_global = {
                "core:description": f"channel {name} extracted by channelizer",
                "core:extensions": [{"name": "channelizer", "version": "1.0.0", "optional": True}],
                "channelizer:channel": name,
                "channelizer:plan_sha256": r.plan_id,
                "channelizer:plan_source": os.path.basename(r.plan_source) if r.plan_source else "",
                "channelizer:source_capture": os.path.basename(cap.path),
                "channelizer:offset_hz": float(r.offset),
                "channelizer:bit_true": bool(self.bit_true),
            }
            w = SigmfWriter(
                os.path.join(out_dir, name),
                datatype=output_format,
                fs=r.plan.output_rate,
                center_frequency=None if centre is None else centre + r.offset,
                global_extra=meta_global,
                capture_extra=timing.capture_fields(cap.start_datetime),
                annotations=timing.annotations(),
                fileset=files,
            )
            self.writers.append(stack.enter_context(w))

    def take(self, k, y):
        """Write channel ``k``'s next output samples and add them to its figures."""
        if self._skip[k]:  # start-up samples left out (--trim-settling)
            cut = min(self._skip[k], y.size)
            y, self._skip[k] = y[cut:], self._skip[k] - cut
        if y.size:
            self.writers[k].write(y)
            # in float64: a sum of squares of large float32 samples overflows float32
            settled = y[max(0, self.settle[k] - self.count[k]):].astype(np.complex128)
            self.power[k] += float(np.vdot(settled, settled).real)
            self.count[k] += y.size
            self.peak[k] = max(self.peak[k], float(np.abs(y.view(y.real.dtype)).max()))
            if self.out_spectra[k] is not None:
                self.out_spectra[k].update(y)

    def run(self, out_dir, files, *, output_format, nonfinite, progress):
        """Stream the capture into one writer per channel (left uncommitted in ``files``)."""
        cap = self.capture
        bar = ProgressBar(cap.num_samples, enabled=None if progress else False, label="extract")
        with contextlib.ExitStack() as stack:
            self.open_writers(stack, out_dir, files, output_format)
            if self.bit_true:
                blocks = cap.raw_blocks(self.block_size)
            else:
                blocks = cap.blocks(self.block_size, nonfinite=nonfinite)
            # an overflow shows as a non-finite output, refused below with one line (not numpy warnings)
            stack.enter_context(np.errstate(over="ignore", invalid="ignore"))
            # reading, converting and the overview spectrum run one block ahead on a second
            # thread (they spend their time in numpy calls that release the interpreter lock)
            side = None if self.overview is None else self._add_to_overview
            if self.read_ahead:
                blocks = read_ahead(blocks, side)
            elif side is not None:
                blocks = _fed_to(blocks, side)
            done = 0
            for i, block in enumerate(blocks):
                for k, y in enumerate(self._outputs(i, block)):
                    if y.size and not np.isfinite(y.view(np.float32)).all():
                        _overflowed(cap, self.names[k], done, block)
                    self.take(k, y)
                done += block.shape[0]
                bar.update(done)
            bar.close()

    def result(self, seconds):
        cap = self.capture
        fs, centre = cap.sample_rate, cap.center_frequency
        results = []
        for k, (r, name, w) in enumerate(zip(self.requests, self.names, self.writers)):
            spec = self.out_spectra[k]
            n_settled = self.count[k] - self.settle[k]
            results.append(
                ChannelResult(
                    name=name,
                    offset=float(r.offset),
                    center_frequency=None if centre is None else float(centre + r.offset),
                    output_rate=float(r.plan.output_rate),
                    samples=int(self.count[k]),
                    mean_power_dbfs=_dbfs(self.power[k] / n_settled) if n_settled > 0 else math.nan,
                    group_delay_output_samples=chain_delay_output_samples(r.plan.stages, fs=fs),
                    plan_id=r.plan_id,
                    files=[os.path.basename(w.data_path), os.path.basename(w.meta_path)],
                    clipped=int(w.clipped),
                    peak=self.peak[k],
                    settled_from=self.settle[k],
                    spectrum=spec.result() if spec is not None and spec.segments else None,
                    timing=self.timing[k],
                )
            )
        ov = self.overview.result() if self.overview is not None and self.overview.segments else None
        return ExtractResult(capture=cap, channels=results, input_samples=cap.num_samples, seconds=seconds, overview=ov)


def _fed_to(blocks, side):
    """The blocks, each passed to ``side`` first: :func:`read_ahead` on this thread."""
    for block in blocks:
        side(block)
        yield block


def _overflowed(capture, name, done, block):
    """A channel's output holds inf or NaN although its input was finite: refuse, naming where."""
    with np.errstate(over="ignore", invalid="ignore"):
        peak = float(np.max(np.abs(block.astype(np.complex128)))) if block.size else 0.0
    raise ChannelizerError(
        f"{capture.path}: channel {name}: the output is not finite after input sample {done} (samples up to "
        f"{peak:.3g} of full scale overflow 32-bit float arithmetic); scale the capture down"
    )


def write_summary(result, out_dir, *, extra=None, fileset=None):
    """Write ``summary.json`` (via a temporary name, or into ``fileset``) and return its path."""
    cap = result.capture
    doc = {
        "capture": os.path.basename(cap.path),
        "audit_resolution_hz": None if result.overview is None else result.overview.bin_hz,
        "sample_rate": cap.sample_rate,
        "center_frequency": cap.center_frequency,
        "input_samples": result.input_samples,
        "seconds": round(result.seconds, 3),
        "channels": [
            {
                "name": c.name,
                "center_frequency": c.center_frequency,
                "offset_hz": c.offset,
                "output_rate": c.output_rate,
                "samples": c.samples,
                "mean_power_dbfs": None if not math.isfinite(c.mean_power_dbfs) else round(c.mean_power_dbfs, 3),
                "group_delay_output_samples": round(c.group_delay_output_samples, 6),
                "plan_sha256": c.plan_id,
                "files": c.files,
                "power_from_sample": c.settled_from,
                "clipped_samples": c.clipped,
                "peak_component": round(c.peak, 6),
                "alias_audit": c.alias_audit,
                **({} if c.timing is None else {
                    "settling_samples": c.timing.settling, "settling_trimmed": c.timing.skipped > 0}),
            }
            for c in result.channels
        ],
    }
    if extra:
        doc.update(extra)
    path = os.path.join(out_dir, "summary.json")
    text = json.dumps(doc, indent=2) + "\n"
    if fileset is not None:
        fileset.write_text(path, text)
    else:
        write_text_atomic(path, text)
    result.summary_path = path
    return path
