"""A plan per detected signal: from a survey's channel list to plan files beside it.

Each signal gets the cheapest chain (:func:`channelizer.planning.planner.plan_chain`)
for the capture's rate and the signal's occupied bandwidth (as rounded up in the
channel list), with the planner's default output rate, ripple and rejection.  The
plan files are written one by one, each atomically; the channel list returned
names each signal's plan so that ``extract --channels`` takes them all at once.
"""

import os

from ..errors import ChannelizerError
from ..io.atomic import write_text_atomic
from ..io.paths import check_outputs
from .processor import _prepare_out_dir

__all__ = ["plan_signals"]


def plan_signals(channels, out_dir, *, fs, list_dir=None, inputs=(), others=()):
    """Plan each channel of a survey's channel list and write ``out_dir/NAME.yaml``.

    Parameters
    ----------
    channels : list of dict
        ``name``, ``frequency`` and ``bandwidth`` (Hz) per signal, as from
        :meth:`channelizer.checks.survey.SurveyResult.channel_list`.
    out_dir : str
        Folder for the plan files (created).
    fs : float
        The capture's sample rate, Hz.
    list_dir : str, optional
        Folder of the channel list the plans will be named in; each ``plan`` path
        is relative to it (default: the current folder).
    inputs : iterable of str
        Files the command reads (the capture): no plan file may be one of them.
    others : iterable of str
        The command's other outputs (its plot, its channel list): no plan file may be one of them.

    Returns
    -------
    (list of dict, list of str)
        The channel list with a ``plan`` for every signal that could be planned,
        and one line per signal that could not (why).
    """
    from ..planning.planner import plan_chain
    from ..planning.spec import ChainSpec

    _prepare_out_dir(out_dir)
    # every file this command writes, checked against what it reads and against each other
    check_outputs([os.path.join(out_dir, f"{ch['name']}.yaml") for ch in channels] + list(others), inputs=inputs)
    base = os.path.abspath(list_dir if list_dir is not None else os.curdir)
    rows, problems = [], []
    for ch in channels:
        row = dict(ch)
        try:
            plan = plan_chain(ChainSpec(input_rate=fs, bandwidth=float(ch["bandwidth"]))).plan
        except ChannelizerError as exc:
            problems.append(f"{ch['name']}: no plan ({exc})")
            rows.append(row)
            continue
        path = os.path.join(out_dir, f"{ch['name']}.yaml")
        write_text_atomic(path, plan.to_yaml())
        row["plan"] = os.path.relpath(os.path.abspath(path), base)
        rows.append(row)
    return rows, problems
