"""Ctrl-C, SIGTERM and internal errors: what the command says, its exit code, and what it leaves.

Exit codes 130 and 143 follow the shell's convention of 128 plus the signal number (common practice,
POSIX sh "Exit Status"). Runs use the exact engine, or a stand-in for the sampler that behaves as the real
one does on Ctrl-C (it catches the interrupt and returns NaN-padded draws), so nothing is compiled.
"""

from __future__ import annotations

import os
import signal
import subprocess
import time
from pathlib import Path

import numpy as np
import pytest

from reportgen import runner
from reportgen.fit import Fitter, PairFit
from reportgen.runs import signals
from tests.test_bad_input import invoke
from tests.test_publish import child, copy_of, ours_beside, snapshot, sums_check


@pytest.fixture(autouse=True)
def _pages_not_drawn(placeholder_pdf: None) -> None:
    """No check here reads a page of the report (see tests.conftest.PLACEHOLDER_PDF)."""


@pytest.fixture
def previous(tmp_path: Path, last_month: Path) -> tuple[Path, Path, dict[str, bytes]]:
    return copy_of(last_month, tmp_path)


def _wait_for(ready: Path, process: subprocess.Popen[str]) -> None:
    deadline = time.monotonic() + 90
    while not ready.exists() and process.poll() is None and time.monotonic() < deadline:
        time.sleep(0.1)
    assert ready.exists(), process.communicate()[1]


@pytest.mark.parametrize(("signum", "code", "name"), [(signal.SIGTERM, 143, "SIGTERM"), (signal.SIGINT, 130, "Ctrl-C")])
def test_a_signal_mid_run_changes_nothing(tmp_path: Path, previous: tuple, signum: int, code: int,
                                          name: str) -> None:
    spec, out, before = previous
    ready = tmp_path / "ready"
    process = child(tmp_path, "wait", spec, out, REPORTGEN_TEST_READY=str(ready))
    _wait_for(ready, process)
    process.send_signal(signum)
    _, stderr = process.communicate(timeout=60)
    assert process.returncode == code
    assert stderr.splitlines() == [f"reportgen: interrupted ({name}); no output was changed"]
    assert snapshot(out) == before and ours_beside(out) == []


def test_sigterm_during_the_swap_waits_and_says_the_outputs_were_published(tmp_path: Path, previous: tuple) -> None:
    spec, out, before = previous
    process = child(tmp_path, "term-in-swap", spec, out)
    _, stderr = process.communicate(timeout=120)
    assert process.returncode == 143
    assert stderr.splitlines() == [f"reportgen: interrupted (SIGTERM); after the new outputs were published to {out}"]
    assert sums_check(out).returncode == 0 and b"Next month" in (out / "report.html").read_bytes()
    assert ours_beside(out) == []


def test_signals_are_held_inside_the_block_and_raised_after() -> None:
    with signals.handling_signals() as state:
        with pytest.raises(signals.Interrupted) as raised:
            with signals.signals_held():
                os.kill(os.getpid(), signal.SIGTERM)
                time.sleep(0.05)  # the handler has run by now, and recorded rather than raised
                assert state.received == signal.SIGTERM
        assert raised.value.signum == signal.SIGTERM
    assert signal.getsignal(signal.SIGTERM) is not signals._on_signal  # the old handler is back


def _nan_padded_fit(pair: object, model: str) -> PairFit:
    """What the sampler returns when it stops early: the draws it did not make are NaN."""
    values = np.full((2, 400), np.nan)
    values[:, :10] = 0.3
    draws = {"rho": values, "mu_x": values, "mu_y": values, "sigma_x": values, "sigma_y": values}
    return PairFit(key=str(pair), model=model, seed=1, draws=draws, diverging=np.zeros((2, 400), bool),
                   energy=values, netcdf=b"", seconds=0.1, compile_seconds=0.0)


def test_ctrl_c_swallowed_by_the_sampler_still_stops_the_run(previous: tuple, monkeypatch: pytest.MonkeyPatch) -> None:
    spec, out, before = previous

    def sampler_catching_ctrl_c(self: Fitter, pair: object, master_seed: int, model: str = "normal") -> PairFit:
        try:
            os.kill(os.getpid(), signal.SIGINT)
            time.sleep(5)
        except KeyboardInterrupt:
            pass  # as the sampler does: it stops and returns what it has
        return _nan_padded_fit(pair, model)

    monkeypatch.setattr(Fitter, "fit", sampler_catching_ctrl_c)
    result = invoke("run", spec, "--out", out)
    assert result.exit_code == 130
    assert result.stderr.splitlines() == ["reportgen: interrupted (Ctrl-C); no output was changed"]
    assert snapshot(out) == before and ours_beside(out) == []


def test_draws_that_are_not_finite_fail_the_pair_with_a_reason(previous: tuple,
                                                               monkeypatch: pytest.MonkeyPatch) -> None:
    spec, out, _ = previous
    monkeypatch.setattr(Fitter, "fit", lambda self, pair, seed, model="normal": _nan_padded_fit(pair, model))
    result = invoke("run", spec, "--out", out)
    assert result.exit_code == 1, result.output
    assert "Traceback" not in result.output
    assert "failed the convergence checks: alpha vs b" in result.stderr
    log = (out / "run.log").read_text(encoding="utf-8")
    assert '"status": "failed"' in log and "not finite numbers (NaN or inf) for rho" in log


def test_an_internal_error_exits_3_with_one_line_and_the_traceback_in_a_file(
        previous: tuple, monkeypatch: pytest.MonkeyPatch) -> None:
    spec, out, before = previous

    def broken(*args: object) -> str:
        raise ValueError("an impossible value")

    monkeypatch.setattr(runner, "results_csv", broken)
    result = invoke("run", spec, "--out", out, "--engine", "exact")
    assert result.exit_code == 3
    (line,) = result.stderr.splitlines()
    prefix = "reportgen: internal error (ValueError: an impossible value); this is a bug; the traceback is in "
    assert line.startswith(prefix)
    log = Path(line.removeprefix(prefix))
    assert log.parent == out.parent and log.name.startswith("reportgen-error-")
    text = log.read_text(encoding="utf-8")
    assert "Traceback (most recent call last)" in text and "in broken" in text and "ValueError" in text
    assert snapshot(out) == before and ours_beside(out) == []
    debug = invoke("--debug", "run", spec, "--out", out, "--engine", "exact")
    assert isinstance(debug.exception, ValueError)  # --debug lets the traceback through
