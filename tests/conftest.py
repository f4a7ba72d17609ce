"""Shared test helpers: build studies from small dicts without touching the disk."""

from __future__ import annotations

import copy
import os

import pytest

os.environ.setdefault("MPLBACKEND", "Agg")


def pytest_configure(config):
    # The Ctrl-C tests check the package's own handling of SIGINT, in this process and in
    # the commands they start.  A test run started in the background by a shell without job
    # control inherits SIGINT *ignored* (and passes that on to every child), which would
    # make those tests depend on how pytest was launched: restore Python's default handler.
    import signal
    import threading

    if (threading.current_thread() is threading.main_thread()
            and signal.getsignal(signal.SIGINT) is signal.SIG_IGN):
        signal.signal(signal.SIGINT, signal.default_int_handler)


def make_study(**sections):
    """A valid small study; keyword arguments override whole sections or single keys."""
    from eddyhop.study.spec import parse_study

    document = {
        "title": "test study",
        "flow": {"family": "cellular", "U": 1.0, "k": 1.0},
        "noise": {"peclet": 10.0},
        "run": {"particles": 256, "dt": 0.02, "t_end": 2.0, "n_times": 10, "seed": 7,
                "progress": False},
    }
    for name, value in sections.items():
        if isinstance(value, dict) and isinstance(document.get(name), dict) and not value.get(
                "_replace"):
            document[name] = {**document[name], **value}
        else:
            document[name] = value
        if isinstance(document[name], dict):
            document[name].pop("_replace", None)
    return parse_study(copy.deepcopy(document))


@pytest.fixture
def study_factory():
    return make_study


# Reliability suite counters (tests/test_reliability.py): suite → tried / held / accepted.
# Under pytest-xdist each worker counts its own; the workers hand their counts to the
# controlling process (``workeroutput``), which adds them up and prints the summary.
RELIABILITY: dict[str, dict[str, int]] = {}


def pytest_sessionfinish(session):
    workeroutput = getattr(session.config, "workeroutput", None)
    if workeroutput is not None:  # an xdist worker: report to the controller
        workeroutput["reliability"] = {suite: dict(counts)
                                       for suite, counts in RELIABILITY.items()}


@pytest.hookimpl(optionalhook=True)
def pytest_testnodedown(node, error):  # an xdist hook: called in the controller
    for suite, counts in getattr(node, "workeroutput", {}).get("reliability", {}).items():
        total = RELIABILITY.setdefault(suite, {"tried": 0, "held": 0, "accepted": 0})
        for key, value in counts.items():
            total[key] = total.get(key, 0) + value


def pytest_terminal_summary(terminalreporter):
    for suite, counts in RELIABILITY.items():
        terminalreporter.write_line(
            f"reliability: {suite}: tried {counts['tried']}, held {counts['held']} "
            f"({counts['accepted']} accepted, {counts['held'] - counts['accepted']} refused "
            "in one line)")
