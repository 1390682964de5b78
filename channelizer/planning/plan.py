"""The plan: a complete, recomputable description of a decimation chain.

A plan round-trips exactly through YAML (``Plan.to_yaml`` / ``Plan.from_yaml``);
loading uses ``yaml.safe_load`` only and validates every field, so a plan file
edited by hand is refused with a message naming the field when it is wrong.
"""

from dataclasses import dataclass, field
import difflib
import hashlib
import math
import sys

import numpy as np
import yaml

from ..errors import shown
from ..strict_yaml import safe_load_unique
from ..errors import ChannelizerError
from ..units import MAX_HZ, MIN_HZ, format_hz
from .hogenauer import planned_cic
from .stages import CicStage, FirStage, ResamplerStage, chain_rates, is_halfband

__all__ = ["Plan", "PlanText", "PLAN_FORMAT", "MAX_PLAN_BYTES", "MAX_COEFFICIENT_BITS", "load_plan_text", "stage_to_dict"]

PLAN_FORMAT = "channelizer-plan/1"
# The keys a plan may hold, at each level; any other key is refused (a misspelt key
# such as ``stopband_egde`` would otherwise be ignored silently).
_PLAN_KEYS = ("format", "input_rate", "output_rate", "bandwidth", "spec", "stages", "predicted")
_SPEC_KEYS = ("ripple_db", "rejection_db", "objective", "bits", "clock", "stopband_edge")
_BITS_KEYS = ("input", "output", "coefficient")
_FIR_KEYS = ("kind", "role", "decimation", "coefficient_bits", "coefficient_frac_bits", "taps")
_STAGE_KEYS = {
    "cic": ("kind", "decimation", "order", "differential_delay", "register_bits", "pruned_bits"),
    "fir": _FIR_KEYS,
    "halfband": _FIR_KEYS,
    "resampler": ("kind", "interpolation", "decimation", "coefficient_bits", "coefficient_frac_bits", "taps"),
}
MAX_PLAN_BYTES = 16 * 1024 * 1024
#: Largest tap magnitude: a stage's taps hold its gain, and the chain has unit gain at DC.
MAX_TAP = 1e6
#: Widest coefficient a plan may hold: the export writes each as a C ``int32_t``.
MAX_COEFFICIENT_BITS = 32
#: Widest CIC register a plan may state.  Hogenauer's width is the input width plus
#: N log2(RM): 64-bit input (the most a spec states) and N = 10, RM = 256 need 144 bits,
#: and the integer model is exact at any width (dsp/wide_int.py).
MAX_REGISTER_BITS = 256


class PlanText:
    """YAML text in and out, and identity, for a plan class with ``to_dict``/``from_dict``."""

    def to_yaml(self):
        """YAML text; floats are written so that YAML 1.1 reads them back as floats."""
        return yaml.safe_dump(self.to_dict(), sort_keys=False, default_flow_style=None, width=100)

    @classmethod
    def from_yaml(cls, text, *, source="plan"):
        """Read and validate a plan; ``source`` names the file in error messages."""
        return cls.from_dict(load_plan_text(text, source=source), source=source)

    def identity(self):
        """SHA-256 of the plan's YAML text: the same plan always has the same identity."""
        return hashlib.sha256(self.to_yaml().encode("utf-8")).hexdigest()


@dataclass(frozen=True)
class Plan(PlanText):
    """A planned chain.

    Attributes
    ----------
    input_rate, output_rate, bandwidth : float
        Hz.
    spec : dict
        ``ripple_db``, ``rejection_db``, ``objective``, ``clock`` and ``bits``
        (``input``, ``output``, ``coefficient``).
    stages : tuple of stages
    predicted : dict
        At least ``passband_ripple_db``, ``alias_rejection_db``,
        ``multiplies_per_input_sample``.
    """

    input_rate: float
    output_rate: float
    bandwidth: float
    spec: dict
    stages: tuple
    predicted: dict = field(default_factory=dict)

    # ------------------------------------------------------------------ YAML
    def to_dict(self):
        stages = [stage_to_dict(st) for st in self.stages]
        return {
            "format": PLAN_FORMAT,
            "input_rate": float(self.input_rate),
            "output_rate": float(self.output_rate),
            "bandwidth": float(self.bandwidth),
            "spec": _plain(self.spec),
            "stages": stages,
            "predicted": _plain(self.predicted),
        }

    @classmethod
    def from_dict(cls, data, *, source="plan"):
        v = _Validator(source)
        if not isinstance(data, dict):
            raise ChannelizerError(f"{source}: expected a mapping of plan keys, got {_kind(data)}")
        fmt = data.get("format")
        if fmt == "channelizer-bank/1":
            raise ChannelizerError(f"{source}: a filter-bank plan; this command takes a chain plan (run a bank plan with extract --plan)")
        if fmt != PLAN_FORMAT:
            raise ChannelizerError(f"{source}: format must be {PLAN_FORMAT!r}, got {shown(fmt)}")
        input_rate = v.rate(data, "input_rate")
        output_rate = v.rate(data, "output_rate")
        bandwidth = v.rate(data, "bandwidth")
        if bandwidth >= output_rate:
            raise ChannelizerError(f"{source}: bandwidth {bandwidth:g} must be below output_rate {output_rate:g}")
        spec_out = v.spec(data)
        raw_stages = data.get("stages")
        if not isinstance(raw_stages, list) or not raw_stages:
            raise ChannelizerError(f"{source}: stages must be a non-empty list")
        v.n_stages = len(raw_stages)
        stages = tuple(v.stage(s, i) for i, s in enumerate(raw_stages))
        for i, st in enumerate(stages[:-1]):
            if isinstance(st, ResamplerStage):
                raise ChannelizerError(f"{source}: stages[{i}]: a resampler must be the last stage")
        rate = chain_rates(stages, fs=input_rate)[-1]
        if not math.isclose(rate, output_rate, rel_tol=1e-9):
            raise ChannelizerError(
                f"{source}: the stages take {format_hz(input_rate, 'sps')} to {format_hz(rate, 'sps', 9)}, but output_rate says {format_hz(output_rate, 'sps', 9)}"
            )
        predicted = data.get("predicted", {})
        if not isinstance(predicted, dict):
            raise ChannelizerError(f"{source}: predicted must be a mapping")
        for key in ("passband_ripple_db", "alias_rejection_db", "multiplies_per_input_sample"):
            if key not in predicted:
                raise ChannelizerError(f"{source}: predicted.{key} is missing")
            v.number(predicted, key, f"predicted.{key}")
        for key, x in predicted.items():  # the rest are figures too; tables format them as numbers
            if isinstance(x, bool) or not isinstance(x, (int, float)) or (isinstance(x, int) and not _finite(x)):
                v.fail(f"predicted.{key}", f"expected a number, got {_kind(x)}")
        if "stopband_rejection_db" in predicted and "stopband_edge" not in spec_out:
            v.fail("predicted.stopband_rejection_db", "given, but spec.stopband_edge (what it refers to) is missing")
        # last, so that a wrong value of a known key is named first
        v.known(data, _PLAN_KEYS, "")
        v.known(data["spec"], _SPEC_KEYS, "spec.")
        v.known(data["spec"]["bits"], _BITS_KEYS, "spec.bits.")
        for i, s in enumerate(raw_stages):
            v.known(s, _STAGE_KEYS[s["kind"]], f"stages[{i}].")
        return cls(input_rate, output_rate, bandwidth, spec_out, stages, dict(predicted))

    # -------------------------------------------------------------- helpers
    @property
    def total_decimation(self):
        """Input rate over output rate."""
        return self.input_rate / self.output_rate



def load_plan_text(text, *, source="plan"):
    """Parse a plan file's bytes or text with a safe loader refusing repeated keys; a one-line error names ``source``.

    Returns the loaded data (not yet validated).
    """
    if isinstance(text, bytes):
        if len(text) > MAX_PLAN_BYTES:
            raise ChannelizerError(f"{source}: file is larger than {MAX_PLAN_BYTES // 2**20} MiB; not a plan")
        try:
            text = text.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise ChannelizerError(f"{source}: not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    if len(text) > MAX_PLAN_BYTES:
        raise ChannelizerError(f"{source}: file is larger than {MAX_PLAN_BYTES // 2**20} MiB; not a plan")
    try:
        data = safe_load_unique(text)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        tag = problem.partition("could not determine a constructor for the tag ")[2]
        if isinstance(exc, yaml.constructor.ConstructorError) and tag:
            raise ChannelizerError(f"{source}: YAML tag {tag}{where} is not allowed; a plan holds plain YAML only") from None
        raise ChannelizerError(f"{source}: malformed YAML{where}: {problem}") from None
    except RecursionError:
        raise ChannelizerError(f"{source}: malformed YAML: nested too deeply to read") from None
    except ValueError as exc:  # e.g. an integer of more digits than Python converts
        raise ChannelizerError(f"{source}: a YAML value cannot be read ({str(exc).splitlines()[0]})") from None
    if data is None:
        raise ChannelizerError(f"{source}: the file is empty; expected a mapping of plan keys")
    return data


def stage_to_dict(st):
    """A stage as the plain mapping a plan file holds (read back by the plan validator)."""
    if isinstance(st, CicStage):
        d = {
            "kind": "cic",
            "decimation": st.decimation,
            "order": st.order,
            "differential_delay": st.differential_delay,
            "register_bits": st.register_bits,
            "pruned_bits": list(st.pruned_bits),
        }
    elif isinstance(st, ResamplerStage):
        d = {"kind": "resampler", "interpolation": st.interpolation, "decimation": st.decimation}
        if st.coefficient_bits is not None:
            d["coefficient_bits"] = st.coefficient_bits
            d["coefficient_frac_bits"] = st.coefficient_frac_bits
        d["taps"] = [float(t) for t in st.taps]
    else:
        d = {"kind": st.kind, "role": st.role, "decimation": st.decimation}
        if st.coefficient_bits is not None:
            d["coefficient_bits"] = st.coefficient_bits
            d["coefficient_frac_bits"] = st.coefficient_frac_bits
        d["taps"] = [float(t) for t in st.taps]
    return d


def _plain(obj):
    """Convert numpy scalars and tuples so that safe_dump writes plain YAML."""
    if isinstance(obj, dict):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    if isinstance(obj, (np.floating,)):
        return float(obj)
    if isinstance(obj, (np.integer,)):
        return int(obj)
    return obj


def _kind(x):
    """A bad value for a message: containers by their kind (they may be huge or hold
    themselves through YAML aliases), anything else shortened."""
    if isinstance(x, dict):
        return "a mapping"
    if isinstance(x, list):
        return "a list"
    return shown(x)


def _finite(x):
    """``math.isfinite`` that also takes integers too large for a float (YAML reads any digits)."""
    return abs(x) <= sys.float_info.max


def _reads_as_float(x):
    """True for text such as ``1e6`` that YAML 1.1 leaves as a string but Python reads as a number."""
    try:
        return isinstance(x, str) and math.isfinite(float(x))
    except ValueError:
        return False


class _Validator:
    def __init__(self, source):
        self.source = source
        self.bits = None  # spec.bits, once read (the CIC widths are checked against them)
        self.n_stages = 0  # how many stages the plan has (a CIC's widths depend on where it sits)

    def fail(self, where, what):
        raise ChannelizerError(f"{self.source}: {where}: {what}")

    def known(self, d, keys, prefix):
        """Refuse a key that is not one of ``keys`` (a misspelt key would otherwise be ignored)."""
        for key in d:
            if key not in keys:
                close = difflib.get_close_matches(str(key), keys, n=1)
                hint = f" (did you mean {close[0]!r}?)" if close else f"; expected one of {', '.join(keys)}"
                name = key if isinstance(key, str) and key.isidentifier() else shown(key)
                self.fail(f"{prefix}{name}", f"unknown key{hint}")

    def hogenauer(self, where, order, dec, m, reg, pruned, *, first, last):
        """A CIC's stated widths must be those the bit-true chain builds (``planned_cic``).

        The bit-true chain and the export derive the widths they build by the same rule
        (Hogenauer's, from the words entering and leaving the CIC), so a plan may not
        state others.
        """
        built = planned_cic(order, dec, m, bits=self.bits, first=first, last=last)
        regs = built.nominal
        basis = f"order {order}, decimation {dec}, M {m}, {built.input_bits}-bit input"
        if reg != regs.full_bits:
            self.fail(f"{where}.register_bits", f"{reg}, but Hogenauer's width for {basis} is {regs.full_bits}; "
                      f"a plan states the width the chain uses: write {regs.full_bits}")
        if pruned and tuple(pruned) != regs.discarded:
            self.fail(f"{where}.pruned_bits", f"{shown(pruned)} differ from Hogenauer's pruning "
                      f"{list(regs.discarded)} for {basis}, {regs.output_bits}-bit output "
                      f"({'the chain output' if last else 'the output width plus a fraction bit'}); "
                      "write those or leave the list out")

    def number(self, d, key, where=None):
        where = where or key
        if key not in d:
            self.fail(where, "missing")
        x = d[key]
        if isinstance(x, bool) or not isinstance(x, (int, float)):
            hint = " (YAML 1.1 reads 1e6 as text: write 1.0e+06)" if _reads_as_float(x) else ""
            self.fail(where, f"expected a number, got {_kind(x)}{hint}")
        if not _finite(x):
            self.fail(where, f"must be finite, got {shown(x)}")
        return float(x)

    def positive(self, d, key, where=None):
        x = self.number(d, key, where)
        if x <= 0:
            self.fail(where or key, f"must be positive, got {x!r}")
        return x

    def rate(self, d, key, where=None):
        x = self.positive(d, key, where)
        if not MIN_HZ <= x <= MAX_HZ:
            self.fail(where or key, f"{x:g} Hz is outside the {MIN_HZ:g} to {MAX_HZ:g} Hz this tool works in")
        return x

    def integer(self, d, key, where=None, lo=1, hi=None):
        where = where or key
        if key not in d:
            self.fail(where, "missing")
        x = d[key]
        if isinstance(x, bool) or not isinstance(x, int):
            self.fail(where, f"expected an integer, got {_kind(x)}")
        if x < lo or (hi is not None and x > hi):
            self.fail(where, f"must be from {lo} to {hi}, got {x}" if hi else f"must be at least {lo}, got {x}")
        return x

    def mapping(self, d, key, where=None):
        where = where or key
        x = d.get(key)
        if not isinstance(x, dict):
            self.fail(where, f"expected a mapping, got {type(x).__name__ if x is not None else 'nothing'}")
        return x

    def spec(self, data):
        """The ``spec`` mapping of a plan file, validated."""
        spec = self.mapping(data, "spec")
        spec_out = {
            "ripple_db": self.positive(spec, "ripple_db", "spec.ripple_db"),
            "rejection_db": self.positive(spec, "rejection_db", "spec.rejection_db"),
        }
        if "objective" in spec:
            if spec["objective"] not in ("cpu", "hardware"):
                raise ChannelizerError(f"{self.source}: spec.objective must be cpu or hardware, got {shown(spec['objective'])}")
            spec_out["objective"] = spec["objective"]
        bits = self.mapping(spec, "bits", "spec.bits")
        spec_out["bits"] = {k: self.integer(bits, k, f"spec.bits.{k}", lo=1, hi=64) for k in ("input", "output")}
        if "coefficient" in bits:
            spec_out["bits"]["coefficient"] = self.coefficient_width(bits, "coefficient", "spec.bits.coefficient")
        if spec.get("clock") is not None:
            spec_out["clock"] = self.rate(spec, "clock", "spec.clock")
        if spec.get("stopband_edge") is not None:
            spec_out["stopband_edge"] = self.rate(spec, "stopband_edge", "spec.stopband_edge")
        self.bits = spec_out["bits"]  # the CIC widths are checked against them
        return spec_out

    def taps(self, d, where):
        t = d.get("taps")
        if not isinstance(t, list) or not t:
            self.fail(f"{where}.taps", "expected a non-empty list of numbers")
        if len(t) > 100_000:
            self.fail(f"{where}.taps", f"{len(t)} taps is more than the 100000 allowed")
        for i, x in enumerate(t):
            if isinstance(x, bool) or not isinstance(x, (int, float)) or not _finite(x):
                self.fail(f"{where}.taps[{i}]", f"expected a finite number, got {_kind(x)}")
            if abs(x) > MAX_TAP:
                self.fail(f"{where}.taps[{i}]", f"{x:g} is beyond the +-{MAX_TAP:g} a tap may be (the chain runs in float32)")
        return tuple(float(x) for x in t)

    def coefficient_width(self, d, key, where):
        b = self.integer(d, key, where, lo=2)
        if b > MAX_COEFFICIENT_BITS:
            self.fail(where, f"{b} bits is wider than the {MAX_COEFFICIENT_BITS} an exported coefficient (C int32_t) holds")
        return b

    def coefficient_bits(self, d, where):
        if "coefficient_bits" not in d:
            return None, None
        b = self.coefficient_width(d, "coefficient_bits", f"{where}.coefficient_bits")
        fb = self.integer(d, "coefficient_frac_bits", f"{where}.coefficient_frac_bits", lo=0, hi=80)
        return b, fb

    def stage(self, s, i):
        where = f"stages[{i}]"
        if not isinstance(s, dict):
            self.fail(where, f"expected a mapping, got {type(s).__name__}")
        kind = s.get("kind")
        if kind == "cic":
            order = self.integer(s, "order", f"{where}.order", lo=1, hi=10)
            dec = self.integer(s, "decimation", f"{where}.decimation", lo=2, hi=1 << 20)
            m = self.integer(s, "differential_delay", f"{where}.differential_delay", lo=1, hi=4)
            reg = self.integer(s, "register_bits", f"{where}.register_bits", lo=1, hi=MAX_REGISTER_BITS)
            pruned = s.get("pruned_bits", [])
            if not isinstance(pruned, list) or any(isinstance(p, bool) or not isinstance(p, int) or p < 0 for p in pruned):
                self.fail(f"{where}.pruned_bits", "expected a list of non-negative integers")
            if pruned and len(pruned) != 2 * order + 1:
                self.fail(f"{where}.pruned_bits", f"expected {2 * order + 1} entries for order {order}, got {len(pruned)}")
            self.hogenauer(where, order, dec, m, reg, pruned, first=i == 0, last=i == self.n_stages - 1)
            return CicStage(dec, order, m, reg, tuple(pruned))
        if kind in ("fir", "halfband"):
            dec = self.integer(s, "decimation", f"{where}.decimation", lo=1, hi=1 << 20)
            taps = self.taps(s, where)
            role = s.get("role", "halfband" if kind == "halfband" else "channel")
            if role not in ("compensator", "channel", "halfband"):
                self.fail(f"{where}.role", f"must be compensator, channel or halfband, got {shown(role)}")
            if kind == "halfband":
                if dec != 2:
                    self.fail(f"{where}.decimation", f"a half-band decimates by 2, got {dec}")
                if not is_halfband(taps, atol=1e-9):
                    self.fail(
                        f"{where}.taps",
                        f"{len(taps)} taps are not a half-band (length 4K-1, centre 0.5, every other tap zero, symmetric)",
                    )
            b, fb = self.coefficient_bits(s, where)
            return FirStage(dec, taps, kind, role, b, fb)
        if kind == "resampler":
            up = self.integer(s, "interpolation", f"{where}.interpolation", lo=1, hi=4096)
            dec = self.integer(s, "decimation", f"{where}.decimation", lo=1, hi=4096)
            taps = self.taps(s, where)
            b, fb = self.coefficient_bits(s, where)
            return ResamplerStage(up, dec, taps, b, fb)
        self.fail(f"{where}.kind", f"must be one of cic, fir, halfband, resampler, got {shown(kind)}")
