"""Every ``$ channelizer ...`` example in README.md prints today what the README shows.

The README's figures must come from real runs (the project's guide), so each example
is run here and its output compared with the README's text, exactly as printed except
extract's wall time and speed; the plan file reference is compared with the plan the
first plan example writes.  When an output changes on purpose, refresh the README with
``python3 -m tests.readme_examples --update`` (see tests/readme_examples.py).
"""

import pytest

try:
    from tests import readme_examples
except ImportError:  # tests/ itself on sys.path
    import readme_examples

EXAMPLES = readme_examples.find_examples(readme_examples.README.read_text())


@pytest.fixture(scope="module")
def runs():
    return readme_examples.run_all()


def test_the_readme_has_examples_of_every_command():
    commands = {ex.command.split()[1] for ex in EXAMPLES}
    assert {"plan", "extract", "survey", "verify", "export"} <= commands


@pytest.mark.parametrize("index", range(len(EXAMPLES)), ids=[ex.command[:60] for ex in EXAMPLES])
def test_example_output_matches_the_readme(runs, index):
    examples, outputs, _ = runs
    problems = readme_examples.differences(examples[index], outputs[index])
    assert not problems, "README example is stale (python3 -m tests.readme_examples --update):\n" + "\n".join(problems)


def test_plan_file_reference_matches_a_real_plan(runs):
    _, _, plan_text = runs
    text = readme_examples.README.read_text()
    problems = readme_examples.reference_differences(text, plan_text)
    assert not problems, "\n".join(problems)


def test_volatile_figures_are_only_timings():
    # extract's header line: the wall time and speed vary between runs, nothing else does
    a = "x.sigmf-meta: 960000 samples at 2.4 Msps, 2 channel(s), float path, 0.07 s (14.0 Msps)"
    b = "x.sigmf-meta: 960000 samples at 2.4 Msps, 2 channel(s), float path, 0.31 s (3.1 Msps)"
    c = "x.sigmf-meta: 960001 samples at 2.4 Msps, 2 channel(s), float path, 0.07 s (14.0 Msps)"
    ex = readme_examples.Example("channelizer extract x", 0, 1, 2, [a])
    assert not readme_examples.differences(ex, [b])
    assert readme_examples.differences(ex, [c])


def test_update_rewrites_outputs_and_keeps_elision():
    text = "intro\n```\n$ channelizer plan --x \\\n      --y\nold 1\n  ...\nold 9\n```\nend"
    (ex,) = readme_examples.find_examples(text)
    assert ex.command == "channelizer plan --x --y" and ex.split() == (1, 1)
    new = readme_examples.updated_text(text, [ex], [["new 1", "new 2", "new 3"]], None)
    assert new == "intro\n```\n$ channelizer plan --x \\\n      --y\nnew 1\n  ...\nnew 3\n```\nend"
