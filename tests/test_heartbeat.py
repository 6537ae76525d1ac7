"""No long silences (README, "Commands"): every long command says something at least every
``SHAPER_HEARTBEAT_S`` seconds (10 by default). The only timed assertions here are that
promise's own, with generous bounds: a few beats."""

from __future__ import annotations

import io
import os
import subprocess
import sys
import time

from helpers import demo_text, pinned_text

from shaper.io.heartbeat import Heartbeat


def test_a_quiet_phase_gets_a_line_and_a_said_one_does_not(monkeypatch):
    terminal = io.StringIO()
    monkeypatch.setattr(sys, "stderr", terminal)
    with Heartbeat(every=0.2, status=lambda: "2 of 4 starts finished"):
        print("optimising 12 ns", file=sys.stderr)
        time.sleep(0.9)  # a long phase, nothing said
    lines = terminal.getvalue().splitlines()
    assert lines[0] == "optimising 12 ns"
    beats = [line for line in lines[1:] if "still at work" in line]
    assert beats and all('after "optimising 12 ns"' in b and "2 of 4 starts finished" in b
                         for b in beats)
    assert sys.stderr is terminal  # given back as it was
    quiet = io.StringIO()
    monkeypatch.setattr(sys, "stderr", quiet)
    with Heartbeat(every=5.0):  # a phase shorter than a beat: nothing added
        print("done at once", file=sys.stderr)
    assert quiet.getvalue() == "done at once\n"


def test_a_handler_that_closes_its_stream_does_not_close_the_terminal(monkeypatch):
    # JAX's logging handler is made while the heartbeat wraps stderr and closes "its"
    # stream at exit: the terminal must stay open for the command's last words
    terminal = io.StringIO()
    monkeypatch.setattr(sys, "stderr", terminal)
    with Heartbeat(every=5.0):
        wrapped = sys.stderr
    wrapped.close()
    print("still here", file=terminal)
    assert not terminal.closed and terminal.getvalue().endswith("still here\n")


def test_many_starts_on_workers_are_never_silent_for_long(tmp_path):
    # four starts on two worker processes: the coordinator waits while the workers import,
    # compile and optimise (about 6-11 s here, measured, without a word before this)
    recipe = tmp_path / "tiny.toml"
    recipe.write_text(pinned_text(demo_text("tiny").replace("levels = 4", "levels = 3"))
                      + '\n[verdict]\nlab_frame = "off"\nextra_levels = 1\n')
    env = {**os.environ, "SHAPER_HEARTBEAT_S": "1"}
    started, stamps = time.monotonic(), []
    with subprocess.Popen([sys.executable, "-m", "shaper.cli.main", "optimize", str(recipe),
                           "--out", str(tmp_path / "run"), "--starts", "4", "--workers", "2",
                           "--no-plots"], env=env, text=True, stdout=subprocess.PIPE,
                          stderr=subprocess.STDOUT, bufsize=1) as proc:
        for line in proc.stdout:
            stamps.append((time.monotonic() - started, line.rstrip("\n")))
        code = proc.wait(timeout=600)
    stamps.append((time.monotonic() - started, f"<exit {code}>"))
    assert code in (0, 1), stamps[-10:]
    gaps = [(b[0] - a[0], b[1]) for a, b in zip([(0.0, "<start>")] + stamps, stamps,
                                                 strict=False)]
    assert max(gaps)[0] < 4.0, max(gaps)  # four beats of 1 s
    assert any("... still at work" in text for _, text in stamps)
