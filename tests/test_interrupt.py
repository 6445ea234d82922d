"""A fit stopped by SIGINT or SIGTERM leaves nothing half-written and an earlier complete set untouched.

A real ``python -m ladder fit`` process on a small invented mock (ladder.simulate) is signalled while it
samples; exit codes follow the shell's 128 + signal number convention (SIGINT 2 -> 130, SIGTERM 15 -> 143).
"""

import signal
import sys
import time
from pathlib import Path

import pytest

from ladder.cli import EXIT_SIGINT, EXIT_SIGTERM, main
from ladder.simulate import MockSettings, simulate, write_mock
from helpers import default_sigint, signal_mid_run

#: Sequential chains of this length keep the process sampling for several seconds after compilation, and a
#: signal is acted on at the latest when the chain in progress ends (a few seconds).
#: NUTS (the default would draw this mock's posterior independently in ~3 s, over before the signal).
LONG = {"chains": 4, "warmup": 1000, "draws": 1000, "chain_method": "sequential", "progress": False,
        "method": "nuts"}
TINY = {"chains": 1, "warmup": 20, "draws": 20, "progress": False}
SIGNAL_DELAY_S = 3.0  # after the "... warm-up ..." line: the process is compiling or sampling, far from writing


def _snapshot(d: Path) -> dict[str, bytes]:
    return {str(p.relative_to(d)): p.read_bytes() for p in sorted(d.rglob("*")) if p.is_file()}


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """The mock with two run files (long and tiny sampling) and a complete earlier output set."""
    base = tmp_path_factory.mktemp("interrupt")
    mock = simulate(MockSettings(n_hosts=4, n_cepheids=100), 11)
    long_run = write_mock(mock, base / "long", run_overrides={"sampler": LONG})["run"]
    tiny_run = write_mock(mock, base / "tiny", run_overrides={"sampler": TINY})["run"]
    out = base / "results" / "out"
    assert main(["fit", str(tiny_run), "--out", str(out), "--no-plots"]) == 0
    before = _snapshot(out)
    assert "provenance.json" in before and "posterior.nc" in before
    return long_run, out, before


@pytest.mark.parametrize("sig, code", [(signal.SIGINT, EXIT_SIGINT), (signal.SIGTERM, EXIT_SIGTERM)],
                         ids=["SIGINT", "SIGTERM"])
def test_signal_mid_fit_writes_nothing_and_keeps_the_earlier_set(runs, sig, code):
    long_run, out, before = runs
    # the CLI announces the sampler ("... warm-up ...") just before it starts
    returncode, stdout, err = signal_mid_run(["fit", long_run, "--out", out, "--force", "--no-plots"],
                                             "warm-up", SIGNAL_DELAY_S, sig)
    assert returncode == code, err
    assert "ladder: interrupted; nothing was written" in err, err
    assert "Traceback" not in err, err
    assert stdout == ""  # no headline: no result
    leftovers = [p.name for p in out.parent.iterdir() if p.name != out.name]
    assert leftovers == [], leftovers  # no .out.partial-* (nor .out.old-*) directory
    assert _snapshot(out) == before  # the earlier complete set, byte for byte (same environment)


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM], ids=["SIGINT", "SIGTERM"])
def test_a_signal_while_the_set_is_swapped_is_acted_on_after_the_swap(sig):
    """write_outputs holds SIGINT/SIGTERM while it replaces the earlier set: the handler runs on leaving."""
    import os

    from ladder.cli import _on_sigterm
    from ladder.outputs import _SignalsHeld

    previous = signal.signal(sig, signal.default_int_handler if sig == signal.SIGINT else _on_sigterm)
    try:
        reached = False
        with pytest.raises(KeyboardInterrupt):
            with _SignalsHeld():
                os.kill(os.getpid(), sig)
                time.sleep(0.05)  # the signal arrives here and is only recorded
                reached = True
        assert reached
    finally:
        signal.signal(sig, previous)


def test_an_interrupt_swallowed_in_a_finalizer_still_stops_the_fit(runs, monkeypatch, capsys):
    """Python cannot raise from a finalizer or weakref callback ("Exception ignored in ..."): a SIGINT that lands
    there is lost as an exception (seen on a real process during the predictive check, which then wrote its
    outputs and exited 0). The CLI's handler records it, and nothing is written after it."""
    import ladder
    from ladder import outputs

    long_run, out, before = runs
    real_fit = ladder.fit

    def fit_then_swallowed_sigint(*a, **k):
        result = real_fit(*a, **k)
        outputs.note_signal(signal.SIGINT)  # as the handler does before its KeyboardInterrupt is swallowed
        return result

    monkeypatch.setattr(ladder, "fit", fit_then_swallowed_sigint)
    tiny = long_run.parent.parent / "tiny" / long_run.name
    with default_sigint():  # else, under a pytest started in the background, no SIGINT could be recorded at all
        assert main(["fit", str(tiny), "--out", str(out), "--force", "--no-plots"]) == EXIT_SIGINT
    assert "ladder: interrupted; nothing was written" in capsys.readouterr().err
    assert [p.name for p in out.parent.iterdir()] == [out.name]  # no .out.partial-* left behind
    assert _snapshot(out) == before


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM], ids=["SIGINT", "SIGTERM"])
def test_an_interrupt_swallowed_in_a_finalizer_is_sent_again_without_a_traceback(sig, capsys):
    """Python swallows an exception raised in a finalizer or a gc callback (JAX runs one at every collection),
    printing it with a traceback: a signal handled there must still stop the run, and print nothing."""
    import gc

    from ladder.cli import _REDELIVER_S, _RedeliverSwallowed, _Terminated

    class RaisesOnCollect:
        def __del__(self):
            raise _Terminated() if sig == signal.SIGTERM else KeyboardInterrupt()

    received = []
    previous_handler = signal.signal(sig, lambda s, f: received.append(s))
    previous_hook = sys.unraisablehook
    hook = sys.unraisablehook = _RedeliverSwallowed(previous_hook)
    try:
        RaisesOnCollect()  # collected at once: the KeyboardInterrupt goes to sys.unraisablehook
        gc.collect()
        deadline = time.monotonic() + 100 * _REDELIVER_S
        while not received and time.monotonic() < deadline:
            time.sleep(_REDELIVER_S / 5)
    finally:
        hook.active = False
        sys.unraisablehook = previous_hook
        signal.signal(sig, previous_handler)
    assert received == [sig]
    assert "Traceback" not in capsys.readouterr().err
