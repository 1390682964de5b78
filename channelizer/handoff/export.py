"""Hardware hand-off of a plan: integer coefficients, bit widths and bit-true test vectors.

:func:`export_plan` writes one folder:

* per FIR, half-band and resampler stage ``i``: ``stage<i>_<role>.csv`` (index,
  integer, value) and ``stage<i>_<role>.hex`` (one two's-complement word per line,
  ``ceil(bits / 4)`` hex digits, no prefix: the memory-file form Verilog's
  ``$readmemh`` reads, IEEE Std 1364);
* ``coefficients.h``: every coefficient set as a ``static const int32_t`` array;
* ``bit_widths.csv`` and ``bit_widths.txt``: the widths of the bit-true chain;
* ``vectors/input.txt`` and the expected output of every stage
  (``vectors/stage<i>_<kind>_output.txt``, ``vectors/output.txt``), computed by
  :class:`~channelizer.integer_chain.IntegerChain`;
* ``README.txt`` describing all of that, and ``manifest.json``, which lists the
  files and marks the folder as an export (so a later export may replace it).

The folder is built under a temporary name beside ``out_dir`` and renamed into
place once complete, so a half-written export never looks like a finished one.
"""

from dataclasses import dataclass
import json
import math
import os

import numpy as np

from ..io.atomic import atomic_output, write_text_atomic
from ..errors import ChannelizerError
from ..planning.hogenauer import CIC_GUARD_BITS, _checked_int
from ..engines.integer_chain import IntegerChain
from ..io.names import safe_output_name
from ..io.run_folder import StagedFolder, folder_entries
from ..planning.plan import MAX_COEFFICIENT_BITS, Plan
from ..planning.response import predict
from ..planning.stages import CicStage, ResamplerStage, chain_rates
from ..units import format_hz

__all__ = ["ExportReport", "export_plan", "EXPORT_FORMAT", "MAX_VECTORS"]

EXPORT_FORMAT = "channelizer-export/1"
MANIFEST = "manifest.json"
VECTOR_DIR = "vectors"
MAX_VECTORS = 10_000_000
_MAX_COEFFICIENT_BITS = MAX_COEFFICIENT_BITS  # each is written as a C int32_t


@dataclass(frozen=True)
class ExportReport:
    """What :func:`export_plan` wrote and how the quantised chain compares with the spec.

    Attributes
    ----------
    out_dir : str
        The folder written.
    files : tuple of str
        Paths written, relative to ``out_dir``.
    coefficient_bits : dict
        ``{stage name: (bits, frac_bits)}`` of every coefficient set.
    meets_spec : bool
        Whether the chain with the quantised coefficients still meets the plan's
        ripple and rejection targets.
    ripple_db, rejection_db : float
        Passband ripple and alias rejection of the quantised chain
        (:func:`channelizer.response.predict`).
    stopband_rejection_db : float or None
        With a plan whose spec has a ``stopband_edge``: the quantised chain's
        rejection of everything landing beyond that edge (also held to
        ``target_rejection_db``).
    target_ripple_db, target_rejection_db : float
        The plan's targets.
    bits_needed : int or None
        When the spec is missed: the smallest coefficient width, for every stage,
        that meets it (None when none up to 32 bits does, or when it is met).
    plan_meets_spec : bool
        Whether the plan's own stages (before this export's quantisation) meet it;
        when they do not, no coefficient width can help.
    input_samples, output_samples : int
        Lengths of the test vectors.
    predicted_noise_rms : float
        The bit-true chain's predicted error per rail, output full-scale units.
    output_scale : float
        Full-scale units per output integer.
    """

    out_dir: str
    files: tuple
    coefficient_bits: dict
    meets_spec: bool
    ripple_db: float
    rejection_db: float
    stopband_rejection_db: float | None
    target_ripple_db: float
    target_rejection_db: float
    bits_needed: int | None
    plan_meets_spec: bool
    input_samples: int
    output_samples: int
    predicted_noise_rms: float
    output_scale: float

    def format(self):
        """A few readable lines for the command line."""
        coefs = ", ".join(f"{name} {b} bits (2^-{f})" for name, (b, f) in self.coefficient_bits.items())
        verdict = "meets the spec" if self.meets_spec else "does NOT meet the spec"
        lines = [
            f"export written to {self.out_dir} ({len(self.files)} files)",
            f"coefficients: {coefs or 'none (no FIR stage)'}",
            f"quantised chain: ripple {self.ripple_db:.4f} dB (target {self.target_ripple_db:g}), "
            f"rejection {self.rejection_db:.2f} dB (target {self.target_rejection_db:g})"
            + (f", beyond the stopband edge {self.stopband_rejection_db:.2f} dB"
               if self.stopband_rejection_db is not None else "")
            + f": {verdict}",
        ]
        if not self.meets_spec:
            if self.bits_needed is not None:
                lines.append(f"  {self.bits_needed}-bit coefficients would meet it (--coefficient-bits {self.bits_needed})")
            elif not self.plan_meets_spec:
                lines.append("  the plan itself misses it before any quantisation; re-plan")
            else:
                lines.append("  no coefficient width up to 32 bits meets it; re-plan")
        if self.input_samples:
            lines.append(f"test vectors: {self.input_samples} input samples, {self.output_samples} output samples")
        db = 20 * math.log10(self.predicted_noise_rms) if self.predicted_noise_rms > 0 else -math.inf
        lines.append(f"predicted output error: {self.predicted_noise_rms:.3g} rms per rail ({db:.1f} dBFS)")
        return "\n".join(lines)


# ----------------------------------------------------------------------------- formats


def _hex_words(integers, bits):
    """Two's-complement words of ``bits`` bits, ``ceil(bits / 4)`` hex digits, one per line."""
    digits = -(-bits // 4)
    mask = (1 << bits) - 1
    return "".join(f"{int(v) & mask:0{digits}x}\n" for v in integers)


def _coefficient_csv(q):
    lines = ["index,integer,value"]
    lines += [f"{k},{int(v)},{int(v) / 2.0**q.frac_bits!r}" for k, v in enumerate(q.integers)]
    return "\n".join(lines) + "\n"


def _c_literal(v):
    # -2^31 cannot be written as a literal of type int: spell it as an expression.
    return "(-2147483647 - 1)" if v == -(2**31) else str(int(v))


_ROLE_TEXT = {
    "compensator": "CIC droop compensator FIR",
    "channel": "channel FIR",
    "halfband": "half-band decimator",
    "resampler": "rational resampler filter (runs at the up-sampled rate)",
}


def _cic_widths(chain):
    """``{point: {...}}`` of every CIC's widths as the bit-true chain builds them."""
    return {
        r.name: {
            "register_bits": r.register_bits,
            "guard_bits": CIC_GUARD_BITS,
            "pruned_bits": list(r.pruned_bits),
            "integrator_bits": list(r.integrator_bits),
            "comb_bits": list(r.comb_bits),
            "output_shift": r.output_shift,
        }
        for r in chain.widths if r.kind == "cic"
    }


def _c_cic(cics):
    """Macros and arrays of every CIC's register widths, as the bit-true chain builds them."""
    out = []
    for name, w in cics.items():
        macro = safe_output_name(name).upper()
        n = len(w["integrator_bits"])
        out += [
            f"/* {name}: CIC of order {n}. Hogenauer's full width {w['register_bits']} bits plus",
            f" * {w['guard_bits']} guard bit; register j is {w['register_bits'] + w['guard_bits']} - pruned[j] bits wide",
            " * (integrators 1..N, then combs); the output drops pruned[2N] LSBs in all. */",
            f"#define {macro}_ORDER {n}",
            f"#define {macro}_REGISTER_BITS {w['register_bits']}",
            f"#define {macro}_GUARD_BITS {w['guard_bits']}",
            f"static const int32_t {macro.lower()}_pruned[{2 * n + 1}] = {{{', '.join(map(str, w['pruned_bits']))}}};",
            f"static const int32_t {macro.lower()}_widths[{2 * n}] = "
            f"{{{', '.join(map(str, w['integrator_bits'] + w['comb_bits']))}}};",
            "",
        ]
    return out


def _c_header(plan, entries, cics=None):
    """``coefficients.h``: one ``static const int32_t`` array per coefficient set, and the CIC widths."""
    out = [
        "/* Integer FIR coefficients of a planned decimation chain.",
        f" * Chain: {format_hz(plan.input_rate, 'sps')} -> {format_hz(plan.output_rate, 'sps')}, "
        f"channel {format_hz(plan.bandwidth)}.",
        f" * Plan identity (SHA-256 of the plan file): {plan.identity()}",
        " * Coefficient k of a stage is stageN_role[k] * 2^-STAGEN_ROLE_FRAC_BITS.",
        " */",
        "#ifndef CHANNELIZER_COEFFICIENTS_H",
        "#define CHANNELIZER_COEFFICIENTS_H",
        "",
        "#include <stdint.h>",
        "",
    ]
    for e in entries:
        ident, macro = e["base"], e["base"].upper()
        ratio = (f"interpolation {e['stage'].interpolation}, decimation {e['stage'].decimation}"
                 if isinstance(e["stage"], ResamplerStage) else f"decimation {e['stage'].decimation}")
        q = e["taps"]
        out += [
            f"/* Stage {e['index']}: {_ROLE_TEXT.get(e['stage'].role, e['stage'].role)}.",
            f" * Input rate {e['rate_in']!r} Hz, output rate {e['rate_out']!r} Hz, {ratio}.",
            f" * {len(q.integers)} coefficients of {q.bits} bits, scale 2^-{q.frac_bits}. */",
            f"#define {macro}_TAPS {len(q.integers)}",
            f"#define {macro}_BITS {q.bits}",
            f"#define {macro}_FRAC_BITS {q.frac_bits}",
            f"static const int32_t {ident}[{macro}_TAPS] = {{",
        ]
        values = [_c_literal(v) for v in q.integers]
        for k in range(0, len(values), 8):
            out.append("    " + ", ".join(values[k : k + 8]) + ("," if k + 8 < len(values) else ""))
        out += ["};", ""]
    out += _c_cic(cics or {})
    out.append("#endif /* CHANNELIZER_COEFFICIENTS_H */")
    return "\n".join(out) + "\n"


def _readme(plan, chain, entries, vectors, outputs):
    lines = [
        "Hardware hand-off of a planned decimation chain",
        "===============================================",
        "",
        f"Chain: {format_hz(plan.input_rate, 'sps')} in, {format_hz(plan.output_rate, 'sps')} out, "
        f"channel {format_hz(plan.bandwidth)} wide.",
        f"Plan identity (SHA-256 of the plan file): {plan.identity()}",
        f"Samples: {chain.input_bits}-bit I and Q in, {chain.output_bits}-bit I and Q out, two's complement.",
        "",
        "Stages",
        "------",
    ]
    rates = chain_rates(plan.stages, fs=plan.input_rate)
    for i, st in enumerate(plan.stages, start=1):
        what = ("CIC decimator, order {0.order}, differential delay {0.differential_delay}".format(st)
                if isinstance(st, CicStage) else _ROLE_TEXT.get(st.role, st.role))
        lines.append(f"  {i}. {what}: {rates[i - 1]!r} Hz -> {rates[i]!r} Hz")
    lines += [
        "",
        "Files",
        "-----",
        "coefficients.h",
        "    C header (C99, <stdint.h>): one static const int32_t array per FIR, half-band",
        "    and resampler stage, with the stage's rates, width and scale in a comment and as",
        "    macros (_TAPS, _BITS, _FRAC_BITS). Coefficient k = array[k] * 2^-FRAC_BITS.",
        "    Every CIC's register widths as macros (_ORDER, _REGISTER_BITS, _GUARD_BITS) and",
        "    arrays (_pruned, _widths); manifest.json holds the same under cic_registers.",
    ]
    for e in entries:
        lines += [
            f"{e['base']}.csv",
            f"    Stage {e['index']} coefficients: index, integer, value (= integer * 2^-{e['taps'].frac_bits}).",
            f"{e['base']}.hex",
            f"    The same integers as {e['taps'].bits}-bit two's-complement words, one per line,",
            f"    {-(-e['taps'].bits // 4)} hex digits, first coefficient first: a memory file for",
            "    Verilog's $readmemh (IEEE Std 1364).",
        ]
    lines += [
        "bit_widths.csv, bit_widths.txt",
        "    Width of every point of the bit-true chain: input and output bits, headroom,",
        "    accumulator, CIC integrator and comb widths after pruning, the LSBs dropped and",
        "    whether they are rounded or truncated, and what happens out of range.",
    ]
    if vectors:
        lines += [
            "vectors/input.txt",
            f"    {vectors} input samples, one per line: I then Q as decimal integers. In order:",
            "    two tones (one inside the channel, one where the chain must reject an alias),",
            "    a chirp across the whole input band, then random full-scale samples.",
        ]
        for name, n in outputs.items():
            lines += [f"vectors/{name}_output.txt", f"    {n} samples leaving {name}, same layout."]
        lines += [
            "vectors/output.txt",
            "    The chain's output (a copy of the last stage's file).",
            "",
            "Every stage starts from all-zero state. A stage decimating by D emits output n",
            "from the inputs up to index n*D (the first output sees input 0 only) and emits",
            "floor(N / D) outputs for N inputs; a resampler by L/M emits floor(N * L / M).",
        ]
    lines += [
        "",
        "Arithmetic",
        "----------",
        "FIR stages form exact sums of products, then round half up (add half an output LSB,",
        "shift right) and saturate. The CIC truncates at each pruned integrator and comb",
        "(Hogenauer's pruning), rounds half up at its output, and has one guard bit above",
        "Hogenauer's register width. See bit_widths.txt for the shifts at every point.",
        f"One output LSB is {chain.output_scale!r} of full scale (this includes the CIC gain,",
        "which is not a power of two in general).",
        "",
        "manifest.json lists these files; a later export may replace this folder only while",
        "it holds nothing else.",
    ]
    return "\n".join(lines) + "\n"


# ----------------------------------------------------------------------------- vectors


def _test_input(plan, bits, n, seed):
    """Deterministic full-scale input: two tones, a chirp across the band, random samples."""
    rng = np.random.default_rng(seed)
    fs = plan.input_rate
    peak = 2 ** (bits - 1) - 1
    n1 = n // 3
    n2 = n // 3
    n3 = n - n1 - n2
    t1 = np.arange(n1) / fs
    f_in = plan.bandwidth / 4.0
    f_alias = plan.predicted.get("worst_alias_hz")
    if not isinstance(f_alias, (int, float)) or not math.isfinite(f_alias) or abs(f_alias) >= fs / 2:
        f_alias = min(plan.output_rate, 0.45 * fs)
    tones = 0.5 * np.exp(2j * np.pi * f_in * t1) + 0.5 * np.exp(2j * np.pi * f_alias * t1 + 2j * np.pi * rng.random())
    t2 = np.arange(n2) / fs
    span = max(n2, 1) / fs
    chirp = np.exp(2j * np.pi * (-fs / 2.0 * t2 + fs * t2**2 / (2.0 * span)))
    z = np.concatenate([tones, chirp]) * peak
    det = np.stack([np.rint(z.real), np.rint(z.imag)], axis=1)
    det = np.clip(det, -(2 ** (bits - 1)), peak).astype(np.int64)
    rand = rng.integers(-(2 ** (bits - 1)), 2 ** (bits - 1), size=(n3, 2), dtype=np.int64)
    return np.concatenate([det, rand])


# ----------------------------------------------------------------------------- checks


def _meets(pred, spec):
    """The planner's acceptance rule: ripple, alias rejection and (with an edge) stopband rejection."""
    target = spec["rejection_db"]
    return (pred.passband_ripple_db <= spec["ripple_db"] * (1 + 1e-9)
            and pred.alias_rejection_db >= target
            and (pred.adjacent_rejection_db is None or pred.adjacent_rejection_db >= target))


def _predict(plan, stages):
    return predict(stages, fs=plan.input_rate, bandwidth=plan.bandwidth,
                   stopband_edge=plan.spec.get("stopband_edge"))


def _bits_needed(plan, start):
    for bits in range(start, _MAX_COEFFICIENT_BITS + 1):
        try:
            chain = IntegerChain.from_plan(plan, coefficient_bits=bits)
        except ChannelizerError:
            continue
        if _meets(_predict(plan, chain.quantized_stages), plan.spec):
            return bits
    return None


def _check_out_dir(path):
    """Refuse anything but a missing folder, an empty one or an earlier export; return its state."""
    parent = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(parent):
        raise ChannelizerError(f"{path}: folder {parent} does not exist")
    entries = folder_entries(path, hint="; choose another --out")
    if entries is None:
        return "missing"
    if not entries:
        return "empty"
    manifest = os.path.join(path, MANIFEST)
    try:
        with open(manifest, encoding="utf-8") as fh:
            data = json.load(fh)
    except (OSError, ValueError):
        data = None
    if not isinstance(data, dict) or data.get("format") != EXPORT_FORMAT or not isinstance(data.get("files"), list):
        raise ChannelizerError(
            f"{path}: folder is not empty and holds no earlier export; choose another --out or empty it"
        )
    ours = {MANIFEST, VECTOR_DIR} | {str(f) for f in data["files"]}
    for root, dirs, files in os.walk(path):
        for name in dirs + files:
            rel = os.path.relpath(os.path.join(root, name), path)
            if rel not in ours:
                raise ChannelizerError(
                    f"{path}: holds {rel!r}, which the earlier export did not write; move it or choose another --out"
                )
    return "ours"


# ----------------------------------------------------------------------------- export


def export_plan(plan, out_dir, *, coefficient_bits=None, vectors=4096, seed=1):
    """Write a plan's coefficients, bit widths and bit-true test vectors to a folder.

    Parameters
    ----------
    plan : Plan
    out_dir : str or path
        Folder to create.  It may exist when empty, or when it holds an earlier
        export and nothing else (it is then replaced); anything else is refused.
    coefficient_bits : int, optional
        Width of every coefficient set (2 to 32); by default each stage's own
        quantised width, else the plan's ``spec.bits.coefficient``.
    vectors : int, optional
        Number of input samples in the test vectors (0: no vectors).
    seed : int, optional
        Seed of the random part of the test input.

    Returns
    -------
    ExportReport

    Raises
    ------
    ChannelizerError
        For a bad argument or an ``out_dir`` that may not be written.

    Notes
    -----
    The response of the chain with the quantised coefficients is recomputed
    (:func:`channelizer.response.predict`) and compared with the plan's targets.
    When it falls short, wider widths are tried one bit at a time, up to 32, and
    the first that meets the targets is reported as ``bits_needed``.
    """
    if not isinstance(plan, Plan):
        raise ChannelizerError(f"expected a Plan, got {type(plan).__name__}")
    vectors = _checked_int(vectors, "vectors", low=0, high=MAX_VECTORS)
    seed = _checked_int(seed, "seed", low=0, high=2**63 - 1)
    if coefficient_bits is not None:
        coefficient_bits = _checked_int(coefficient_bits, "coefficient bits", low=2, high=_MAX_COEFFICIENT_BITS)
    out_dir = os.fspath(out_dir)
    folder = StagedFolder(out_dir, kind="export", check=_check_out_dir)
    _check_out_dir(out_dir)  # before any work

    chain = IntegerChain.from_plan(plan, coefficient_bits=coefficient_bits)
    rates = chain_rates(plan.stages, fs=plan.input_rate)
    entries = []
    for i, st in enumerate(plan.stages, start=1):
        if isinstance(st, CicStage):
            continue
        entries.append({
            "index": i,
            "stage": st,
            "base": safe_output_name(f"stage{i}_{st.role}"),
            "taps": chain.coefficients[f"stage{i}_{st.kind}"],
            "rate_in": rates[i - 1],
            "rate_out": rates[i],
        })

    pred = _predict(plan, chain.quantized_stages)
    meets = _meets(pred, plan.spec)
    plan_meets = meets or _meets(_predict(plan, plan.stages), plan.spec)
    widest = max((e["taps"].bits for e in entries), default=_MAX_COEFFICIENT_BITS)
    needed = None if meets or not plan_meets else _bits_needed(plan, widest + 1)

    texts = {}
    for e in entries:
        texts[e["base"] + ".csv"] = _coefficient_csv(e["taps"])
        texts[e["base"] + ".hex"] = _hex_words(e["taps"].integers, e["taps"].bits)
    cics = _cic_widths(chain)
    texts["coefficients.h"] = _c_header(plan, entries, cics)
    texts["bit_widths.csv"] = chain.widths.to_csv()
    texts["bit_widths.txt"] = chain.widths.format()
    arrays = {}
    counts = {}
    if vectors:
        x = _test_input(plan, chain.input_bits, vectors, seed)
        arrays[f"{VECTOR_DIR}/input.txt"] = x
        outs = chain.stage_outputs(x)
        for name, y in outs.items():
            arrays[f"{VECTOR_DIR}/{safe_output_name(name + '_output.txt')}"] = y
            counts[name] = y.shape[0]
        arrays[f"{VECTOR_DIR}/output.txt"] = y
    texts["README.txt"] = _readme(plan, chain, entries, vectors, counts)
    files = tuple(sorted(list(texts) + list(arrays) + [MANIFEST]))
    manifest = {"format": EXPORT_FORMAT, "plan_identity": plan.identity(), "files": list(files),
                "cic_registers": cics}

    # built in a hidden folder beside out_dir, which it replaces in one rename (io.run_folder)
    with folder.writing() as tmp:
        if vectors:
            os.mkdir(os.path.join(tmp, VECTOR_DIR))
        for rel, text in texts.items():
            write_text_atomic(os.path.join(tmp, rel), text)
        for rel, a in arrays.items():
            with atomic_output(os.path.join(tmp, rel), "w") as fh:
                np.savetxt(fh, a, fmt="%d", delimiter=" ")
        write_text_atomic(os.path.join(tmp, MANIFEST), json.dumps(manifest, indent=2) + "\n")

    return ExportReport(
        out_dir=out_dir,
        files=files,
        coefficient_bits={e["base"]: (e["taps"].bits, e["taps"].frac_bits) for e in entries},
        meets_spec=meets,
        ripple_db=pred.passband_ripple_db,
        rejection_db=pred.alias_rejection_db,
        stopband_rejection_db=pred.adjacent_rejection_db,
        target_ripple_db=float(plan.spec["ripple_db"]),
        target_rejection_db=float(plan.spec["rejection_db"]),
        bits_needed=needed,
        plan_meets_spec=plan_meets,
        input_samples=vectors,
        output_samples=counts[chain.names[-1]] if vectors else 0,
        predicted_noise_rms=chain.predicted_noise_rms,
        output_scale=chain.output_scale,
    )
