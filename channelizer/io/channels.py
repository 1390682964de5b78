"""Channel requests from the command line or a channel-list file.

A frequency is absolute when the capture states its centre frequency and an
offset from the centre when it does not; a leading ``+`` or ``-`` always means
an offset.
"""

from dataclasses import dataclass
import sys

import yaml

from ..errors import shown
from ..strict_yaml import safe_load_unique
from ..errors import ChannelizerError
from .names import safe_output_name
from ..units import parse_frequency

__all__ = ["ChannelEntry", "parse_channel_option", "parse_channel_list", "resolve_offset", "dump_channel_list"]


@dataclass(frozen=True)
class ChannelEntry:
    """A requested channel before it is tied to a capture.

    ``frequency`` is in Hz; ``is_offset`` says whether it is relative to the
    capture centre; ``plan`` is a plan file path or None (use ``--plan``);
    ``bandwidth`` is the listed occupied bandwidth in Hz, when given.
    """

    name: str
    frequency: float
    is_offset: bool
    plan: str | None = None
    bandwidth: float | None = None


def _frequency(value, where):
    if isinstance(value, str):
        text = value.strip()
        return parse_frequency(text, name=where), text[:1] in "+-"
    # abs(value) <= max float: finite, and no OverflowError for an integer of any length
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not abs(value) <= sys.float_info.max:
        raise ChannelizerError(f"{where}: expected a frequency in Hz, got {shown(value)}")
    return float(value), value < 0


def parse_channel_option(text):
    """Read ``NAME=FREQ`` (e.g. ``ch3=161.1625M`` or ``ch3=+162.5k``)."""
    name, sep, freq = text.partition("=")
    if not sep or not freq.strip():
        raise ChannelizerError(f"--channel {text!r}: expected NAME=FREQ, e.g. voice1=+25k")
    try:
        name = safe_output_name(name.strip())
    except ChannelizerError as exc:
        raise ChannelizerError(f"--channel {shown(text)}: {exc}") from None
    f, off = _frequency(freq, f"--channel {name}")
    return ChannelEntry(name, f, off)


def parse_channel_list(text, *, source="channel list"):
    """Read a YAML channel list: a list of mappings with ``name``, ``frequency`` and optional ``plan``."""
    try:
        data = safe_load_unique(text)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}" if mark else ""
        raise ChannelizerError(f"{source}: malformed YAML{where}") from None
    except RecursionError:
        raise ChannelizerError(f"{source}: malformed YAML: nested too deeply to read") from None
    except ValueError as exc:  # e.g. an integer of more digits than Python converts
        raise ChannelizerError(f"{source}: a YAML value cannot be read ({str(exc).splitlines()[0]})") from None
    if isinstance(data, dict) and "channels" in data:
        data = data["channels"]
    if not isinstance(data, list) or not data:
        raise ChannelizerError(f"{source}: expected a list of channels (name, frequency, optional plan)")
    out = []
    for i, item in enumerate(data):
        where = f"{source}: channel {i + 1}"
        if not isinstance(item, dict):
            raise ChannelizerError(f"{where}: expected a mapping with name and frequency")
        unknown = set(item) - {"name", "frequency", "plan", "bandwidth"}
        if unknown:
            raise ChannelizerError(f"{where}: unknown key(s) {', '.join(sorted(map(str, unknown)))}")
        if not isinstance(item.get("name"), str):
            got = "a list" if isinstance(item.get("name"), list) else shown(item.get("name"))
            raise ChannelizerError(f"{where}: name must be text, got {got}")
        try:
            name = safe_output_name(item["name"])
        except ChannelizerError as exc:
            raise ChannelizerError(f"{where}: {exc}") from None
        if "frequency" not in item:
            raise ChannelizerError(f"{where} ({name}): frequency is missing")
        f, off = _frequency(item["frequency"], f"{where} ({name}) frequency")
        plan = item.get("plan")
        if plan is not None and not isinstance(plan, str):
            raise ChannelizerError(f"{where} ({name}): plan must be a file path, got {shown(plan)}")
        bw = None
        if item.get("bandwidth") is not None:
            bw, _ = _frequency(item["bandwidth"], f"{where} ({name}) bandwidth")
            if not bw > 0:
                raise ChannelizerError(f"{where} ({name}): bandwidth must be above 0 Hz, got {shown(item['bandwidth'])}")
        out.append(ChannelEntry(name, f, off, plan, bw))
    return out


def resolve_offset(entry, center):
    """Offset from the capture centre in Hz for ``entry``."""
    if entry.is_offset or center is None:
        return entry.frequency
    return entry.frequency - center


def dump_channel_list(channels):
    """YAML text of a channel list (``name``, ``frequency`` in Hz, ``bandwidth``) that
    :func:`parse_channel_list` reads back; floats are written as ``1.0e+06`` style."""
    rows = []
    for ch in channels:
        row = {"name": str(ch["name"]), "frequency": float(ch["frequency"])}
        if ch.get("bandwidth") is not None:
            row["bandwidth"] = float(ch["bandwidth"])
        if ch.get("plan"):
            row["plan"] = str(ch["plan"])
        rows.append(row)
    return yaml.safe_dump(rows, sort_keys=False)
