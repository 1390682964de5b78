"""The README's ``$ channelizer ...`` examples: find them, run them, compare, rewrite.

Every fenced block of README.md whose first line starts with ``$ channelizer`` is an
example: the command (``\\`` continues it on the next line) and below it what the
command prints (stdout and stderr, as a terminal shows them).  A line ``...`` in the
output elides the middle: the lines above it are the first lines printed, those
below it the last.  The examples run one after the other in one temporary folder
holding links to the repository's ``captures/`` and ``plans/`` (so a later example
may read what an earlier one wrote, as a reader following the README would).

The plan file reference block (the ```yaml block under "Plan file reference") is
checked against :data:`PLAN_REFERENCE_SOURCE`, the plan the first plan example writes.

Output is compared line by line, exactly as printed, except the wall time and
speed that ``extract`` reports (:data:`VOLATILE`).

Maintainers, after merging changes that alter any output::

    python3 -m tests.readme_examples            # show what differs; exit 1 if anything does
    python3 -m tests.readme_examples --update   # re-run every example, rewrite README.md
"""

import argparse
from dataclasses import dataclass
import os
from pathlib import Path
import re
import shlex
import subprocess
import sys
import tempfile

REPO = Path(__file__).resolve().parent.parent
README = REPO / "README.md"

#: Repository folders the examples read, linked into their working folder.
INPUTS = ("captures", "plans")

#: The plan file the plan file reference is taken from (written by the first plan example).
PLAN_REFERENCE_SOURCE = "wide.yaml"

#: Output that differs from run to run: extract's wall time and speed, and bench's
#: timings and the ratios between them.
VOLATILE = (
    re.compile(r"\d+\.\d+ s \(\d+\.\d+ Msps\)"),
    re.compile(r"\d+\.\d+ s/s +\d+\.\d+ x real time"),
    re.compile(r" {2,}\d+\.\d+ x(?= |$)"),
)

_ELISION = "..."
_NUMBER = re.compile(r"[-+]?\d+(?:\.\d+)?(?:e[-+]?\d+)?")
_YAML_LINE = re.compile(r"^(?P<ind> *)(?P<dash>- )?(?P<key>\w+):(?: (?P<val>.*?))?(?P<com>\s+#.*)?$")


@dataclass
class Example:
    """One ``$ channelizer`` example of the README.

    ``first``: index of the ``$`` line; ``body``: index of the first output line;
    ``end``: index of the closing fence (all indexes into the README's lines).
    """

    command: str
    first: int
    body: int
    end: int
    output: list

    @property
    def elided(self):
        return _ELISION in [line.strip() for line in self.output]

    def split(self):
        """(head, tail) line counts around the elision."""
        i = [line.strip() for line in self.output].index(_ELISION)
        return i, len(self.output) - i - 1


def find_examples(text):
    """The examples of a README text, in order."""
    lines = text.split("\n")
    out = []
    i = 0
    while i < len(lines):
        if lines[i].startswith("```") and i + 1 < len(lines) and lines[i + 1].startswith("$ channelizer"):
            first = i + 1
            j = first
            command = lines[j][2:]
            while command.endswith("\\"):
                j += 1
                command = command[:-1].rstrip() + " " + lines[j].strip()
            end = j + 1
            while not lines[end].startswith("```"):
                end += 1
            out.append(Example(command, first, j + 1, end, lines[j + 1:end]))
            i = end + 1
        else:
            i += 1
    return out


def workspace():
    """A temporary folder with links to :data:`INPUTS` (a ``TemporaryDirectory``)."""
    tmp = tempfile.TemporaryDirectory(prefix="readme-examples-")
    for name in INPUTS:
        os.symlink(REPO / name, Path(tmp.name) / name)
    return tmp


def run_example(example, folder):
    """Run one example in ``folder``; its printed lines (trailing blank lines dropped)."""
    args = shlex.split(example.command)
    if args[0] != "channelizer":
        raise ValueError(f"not a channelizer command: {example.command!r}")
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, [str(REPO), os.environ.get("PYTHONPATH")])))
    env.pop("COLUMNS", None)
    done = subprocess.run(
        [sys.executable, "-m", "channelizer", *args[1:]],
        cwd=folder, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, timeout=900,
    )
    lines = done.stdout.rstrip("\n").split("\n")
    return [line.rstrip() for line in lines]


def run_all(text=None):
    """Run every example in one folder: ``(examples, outputs, plan reference text or None)``."""
    text = README.read_text() if text is None else text
    examples = find_examples(text)
    with workspace() as folder:
        outputs = [run_example(ex, folder) for ex in examples]
        ref = Path(folder) / PLAN_REFERENCE_SOURCE
        plan_text = ref.read_text() if ref.exists() else None
    return examples, outputs, plan_text


def _mask(line):
    for pattern in VOLATILE:
        line = pattern.sub("<varies>", line)
    return line


def shown(example, actual):
    """What the README block would show of ``actual`` (the same elision as now)."""
    if not example.elided:
        return list(actual)
    head, tail = example.split()
    indent = example.output[head][: len(example.output[head]) - len(example.output[head].lstrip())]
    return actual[:head] + [indent + _ELISION] + (actual[len(actual) - tail:] if tail else [])


def differences(example, actual):
    """Lines where the README and today's output differ, with the figures that differ."""
    want, got = example.output, shown(example, actual)
    problems = []
    for n in range(max(len(want), len(got))):
        w = want[n] if n < len(want) else "<missing>"
        g = got[n] if n < len(got) else "<missing>"
        if _mask(w) != _mask(g):
            wn, gn = _NUMBER.findall(_mask(w)), _NUMBER.findall(_mask(g))
            figures = [f"{a} -> {b}" for a, b in zip(wn, gn) if a != b]
            note = f" (figures {', '.join(figures)})" if figures else ""
            problems.append(f"$ {example.command}\n  README: {w}\n  today:  {g}{note}")
    return problems


# ----------------------------------------------------------------------------- plan reference
def _reference_block(lines):
    """(first, end) line indexes of the plan file reference's yaml block."""
    start = lines.index("## Plan file reference")
    first = next(i for i in range(start, len(lines)) if lines[i].startswith("```yaml")) + 1
    end = next(i for i in range(first, len(lines)) if lines[i].startswith("```"))
    return first, end


def _yaml_paths(lines):
    """``{path: (index, match)}`` for the block-style ``key: value`` lines of YAML text."""
    out = {}
    section, stage = None, -1
    for i, line in enumerate(lines):
        m = _YAML_LINE.match(line)
        if not m:
            continue
        key = m["key"]
        if not m["ind"] and not m["dash"]:
            section, stage = key, -1
            path = (key,)
        elif m["dash"]:
            stage += 1
            path = (section, stage, key)
        else:
            path = (section, stage, key) if section == "stages" else (section, key)
        out[path] = (i, m)
    return out


def _text(value):
    """A plan value as the reference block writes it (flow style, floats by repr)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, list):
        return "[" + ", ".join(_text(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{k}: {_text(v)}" for k, v in value.items()) + "}"
    return repr(value) if isinstance(value, float) else str(value)


def _lookup(doc, path):
    try:
        for part in path:
            doc = doc[part]
    except (KeyError, IndexError, TypeError):
        return None
    return doc


def _shown_value(readme_value, actual):
    """``actual`` as text, cut like ``readme_value`` (``[a, b, ...]`` keeps as many items)."""
    if isinstance(actual, list) and readme_value.endswith(", ...]"):
        keep = len(readme_value[1:-1].split(", ")) - 1
        return "[" + ", ".join([_text(v) for v in actual[:keep]] + [_ELISION]) + "]"
    return _text(actual)


def reference_lines(text, plan_text):
    """The plan file reference block with the values of ``plan_text`` (comments kept in place)."""
    import yaml

    doc = yaml.safe_load(plan_text)
    lines = text.split("\n")
    first, end = _reference_block(lines)
    block = lines[first:end]
    for path, (i, m) in _yaml_paths(block).items():
        actual = _lookup(doc, path)
        if m["val"] is None or actual is None:
            continue
        head = f"{m['ind']}{m['dash'] or ''}{m['key']}: {_shown_value(m['val'], actual)}"
        if m["com"]:
            comment = m["com"].lstrip()
            head = head.ljust(len(block[i]) - len(comment) - 1) + " " + comment
        block[i] = head
    return block


def reference_differences(text, plan_text):
    """Values of the plan file reference that differ from ``plan_text``."""
    if plan_text is None:
        return [f"the plan file reference's source {PLAN_REFERENCE_SOURCE} was not written by any example"]
    lines = text.split("\n")
    first, end = _reference_block(lines)
    old, new = _yaml_paths(lines[first:end]), _yaml_paths(reference_lines(text, plan_text))
    return [
        f"plan file reference {'.'.join(map(str, path))}: README {m['val']} -> today {new[path][1]['val']}"
        for path, (_, m) in old.items()
        if m["val"] is not None and m["val"] != new[path][1]["val"]
    ]


# ----------------------------------------------------------------------------- rewrite
def _keep_volatile(old, new):
    """``new`` lines, but the README's own line where only a timing differs (no churn)."""
    if len(old) != len(new):
        return new
    return [o if _mask(o) == _mask(n) else n for o, n in zip(old, new)]


def updated_text(text, examples, outputs, plan_text):
    """README text with every example's output (and the plan file reference) as run today."""
    lines = text.split("\n")
    ref = _reference_block(lines) if plan_text is not None else None
    edits = [(ex.body, ex.end, _keep_volatile(ex.output, shown(ex, out))) for ex, out in zip(examples, outputs)]
    if ref is not None:
        edits.append((ref[0], ref[1], reference_lines(text, plan_text)))
    for first, end, new in sorted(edits, reverse=True):
        lines[first:end] = new
    return "\n".join(lines)


def main(argv=None):
    parser = argparse.ArgumentParser(prog="python3 -m tests.readme_examples", description=__doc__.split("\n\n")[0])
    parser.add_argument("--update", action="store_true", help="rewrite README.md with today's outputs")
    args = parser.parse_args(argv)
    text = README.read_text()
    examples, outputs, plan_text = run_all(text)
    if args.update:
        new = updated_text(text, examples, outputs, plan_text)
        if new != text:
            README.write_text(new)
        print(f"{len(examples)} examples run; README.md {'rewritten' if new != text else 'already current'}")
        return 0
    problems = [p for ex, out in zip(examples, outputs) for p in differences(ex, out)]
    problems += reference_differences(text, plan_text)
    print("\n".join(problems) if problems else f"{len(examples)} examples: README.md is current")
    return 1 if problems else 0


if __name__ == "__main__":
    sys.exit(main())
