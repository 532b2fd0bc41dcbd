"""Long fits release the GIL and stop on Ctrl-C without leaving result files (common practice
for long-running calls in notebooks: KeyboardInterrupt, nothing half-written), and a resumed fit
equals the command line's uninterrupted one."""

from __future__ import annotations

import _thread
import signal
import threading
import time

import pandas as pd
import pytest

import valuedrift as vd
from conftest import DEMO_TRIALS, run_cli, same_csv_files


def test_ctrl_c_stops_a_fit_and_writes_nothing(tmp_path):
    trials = pd.read_csv(DEMO_TRIALS)
    out = tmp_path / "fit"
    # Another Python thread keeps running while the fit runs: the GIL is released.
    ticks = []
    stop = threading.Event()

    def tick():
        while not stop.is_set():
            ticks.append(time.monotonic())
            time.sleep(0.01)

    ticker = threading.Thread(target=tick)
    ticker.start()
    # Ctrl-C as the terminal or a notebook's "interrupt" sends it, one second in. 400 starts per
    # subject keep the fit running well past that (about 5 s on one thread here; 80 starts took
    # 1-2 s, close to the interrupt). Python's own SIGINT handler, as in a terminal or notebook:
    # a process started in the background of a shell without job control inherits SIGINT
    # ignored, and interrupt_main then does nothing (the Python documentation of _thread).
    previous = signal.signal(signal.SIGINT, signal.default_int_handler)
    timer = threading.Timer(1.0, _thread.interrupt_main)
    timer.start()
    started = time.monotonic()
    try:
        with pytest.raises(KeyboardInterrupt):
            vd.fit(trials, "gainloss-linear", out=out, starts=400, threads=1, progress=False)
    finally:
        timer.cancel()
        signal.signal(signal.SIGINT, previous)
        stop.set()
        ticker.join()
    stopped_after = time.monotonic() - started
    print(f"stopped {stopped_after:.2f} s after the start (interrupt at 1.0 s)")
    # No result folder and no staging folder: only the journal of the finished subjects, as
    # the command line keeps it for --resume.
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir()] == [".fit.valuedrift-journal"]
    during = [t for t in ticks if started + 0.1 < t < started + 0.9]
    assert len(during) > 5, f"only {len(during)} ticks of another thread during the fit"
    # The interrupted fit continues from its journal to the result of an uninterrupted run.
    resumed = vd.fit(trials, "gainloss-linear", out=out, starts=400, threads=1, resume=True,
                     progress=False)
    assert len(resumed.summary) == 40
    assert [p.name for p in tmp_path.iterdir()] == ["fit"]
    cli = tmp_path.parent / f"{tmp_path.name}-cli"
    run_cli("fit", "--data", DEMO_TRIALS, "--model", "gainloss-linear", "--out", cli,
            "--starts", 400, "--threads", 1)
    same_csv_files(out, cli)


def test_progress_reaches_python_while_a_fit_runs(capsys):
    # Common practice: a notebook shows how far a long call is; the callback sees the fitting
    # step counted up to its total, and the package's own display prints it.
    from valuedrift._native import run

    trials = pd.read_csv(DEMO_TRIALS)
    small = trials[trials["subject"].isin(["sub-01", "sub-02", "sub-03"])]
    seen = []
    fitted = vd.fit(small, "gainloss-linear", starts=2, threads=1, progress=True)
    shown = capsys.readouterr().out
    assert "fitting 3/3 (100 %)" in shown, shown
    # The whole demo table (40 subjects), so that the fit outlasts several polls (every 0.1 s)
    # on any machine; a few subjects can finish between two polls.
    args = ["fit", "--data", DEMO_TRIALS, "--model", "gainloss-linear", "--out",
            fitted.folder.parent / "again", "--starts", "10", "--threads", "1"]
    run([str(a) for a in args], lambda what, done, total: seen.append((what, done, total)))
    assert seen[-1] == ("fitting", 40, 40), seen
    assert any(what == "fitting" and done < total for what, done, total in seen), seen


def interrupt_at(step: str):
    """A progress callback that raises KeyboardInterrupt (as Ctrl-C does) once the step whose
    name starts with `step` reports: the interrupt lands inside that step every time."""

    def callback(what: str, done: int, total: int) -> None:
        if what.startswith(step):
            raise KeyboardInterrupt

    return callback


def test_an_interrupt_during_the_em_or_a_check_writes_no_result(tmp_path):
    from valuedrift._native import run

    trials = pd.read_csv(DEMO_TRIALS)
    keep = sorted(trials["subject"].unique())
    subset = trials[trials["subject"].isin(keep[:10] + keep[-10:])]
    data = tmp_path / "trials.csv"
    subset.to_csv(data, index=False)
    fit_out = tmp_path / "fit"
    with pytest.raises(KeyboardInterrupt):
        run(["fit", "--data", str(data), "--model", "gainloss-linear", "--out", str(fit_out),
             "--threads", "1", "--hierarchical", "--by", "group", "--em-tolerance", "1e-12"],
            interrupt_at("empirical Bayes"))
    assert not fit_out.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == [".fit.valuedrift-journal", "trials.csv"]

    run_cli("fit", "--data", data, "--model", "gainloss-linear", "--out", fit_out, "--restart")
    check_out = tmp_path / "check"
    with pytest.raises(KeyboardInterrupt):
        run(["check", "--fits", str(fit_out), "--data", str(data), "--model", "gainloss-linear",
             "--out", str(check_out), "--sims", "40"], interrupt_at("simulating"))
    assert not check_out.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fit", "trials.csv"]
