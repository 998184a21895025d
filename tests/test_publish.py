"""Publishing an output folder: one-step replacement, kills at any moment, the lock, foreign files,
mount points, SHA256SUMS and run.log. Runs use the exact engine (about a second each); the kill tests run
``reportgen`` in a child process through a small wrapper that SIGKILLs itself at the chosen moment."""

from __future__ import annotations

import datetime as dt
import errno
import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

from reportgen.errors import OutputError
from reportgen.runner import OUTPUT_FILES
from reportgen.runs import publish
from tests.conftest import PLACEHOLDER_PDF_VARIABLE
from tests.test_bad_input import invoke, project

ROOT = Path(__file__).resolve().parents[1]
# Patches the moment named by REPORTGEN_TEST_POINT, then runs the command line as `reportgen` does.
WRAPPER = r'''
import os, signal, sys, time
from pathlib import Path
from reportgen import report, runner
from reportgen.execution import work
from reportgen.runs import publish

point = os.environ["REPORTGEN_TEST_POINT"]
calls = []
if os.environ.get("''' + PLACEHOLDER_PDF_VARIABLE + r'''"):
    from tests.conftest import placeholder_render_pdf

    report.render_pdf = placeholder_render_pdf

def die(*args, **kwargs):
    os.kill(os.getpid(), signal.SIGKILL)

def then_die(function):
    def wrapped(*args, **kwargs):
        result = function(*args, **kwargs)
        die()
        return result
    return wrapped

def nth_move_dies(n):
    move = publish._move
    def wrapped(source, target):
        calls.append(source)
        if len(calls) == n:
            die()
        move(source, target)
    return wrapped

def wait_in_rendering(*args, **kwargs):
    Path(os.environ["REPORTGEN_TEST_READY"]).touch()
    time.sleep(120)

def terminate_first(function):
    def wrapped(*args, **kwargs):
        os.kill(os.getpid(), signal.SIGTERM)
        time.sleep(0.2)
        return function(*args, **kwargs)
    return wrapped

if point == "fit":
    work.pair_outcome = die
elif point == "render":
    report.render_pdf = die
elif point == "write":
    runner.write_outputs = then_die(runner.write_outputs)
elif point == "sums":
    publish.write_sums = then_die(publish.write_sums)
elif point == "exchange":
    publish._exchange = then_die(publish._exchange)
elif point == "aside":
    publish._exchange = lambda first, second: False
    publish._move = nth_move_dies(2)
elif point.startswith("move-"):
    publish._move = nth_move_dies(int(point.removeprefix("move-")))
elif point == "wait":
    report.render_pdf = wait_in_rendering
elif point == "term-in-swap":
    publish._swap = terminate_first(publish._swap)

from reportgen.cli import main
main(sys.argv[1:], prog_name="reportgen")
'''


def snapshot(folder: Path) -> dict[str, bytes]:
    """Every file under ``folder`` by relative path, with its bytes."""
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def exact_run(spec: Path, out: Path, *extra: str) -> None:
    result = invoke("run", spec, "--out", out, "--engine", "exact", *extra)
    assert result.exit_code == 0, result.output


def retitled(spec: Path) -> None:
    """Change the report so that the next run's bytes differ from the previous run's."""
    spec.write_text(spec.read_text(encoding="utf-8").replace("Test report", "Next month"), encoding="utf-8")


def ours_beside(out: Path) -> list[str]:
    return sorted(p.name for p in out.parent.iterdir() if p.name.startswith(f".{out.name}."))


def child(tmp_path: Path, point: str, spec: Path, out: Path, **env: str) -> subprocess.Popen[str]:
    wrapper = tmp_path / "wrapper.py"
    wrapper.write_text(WRAPPER, encoding="utf-8")
    environment = {**os.environ, "REPORTGEN_TEST_POINT": point, "PYTHONPATH": str(ROOT), **env}
    return subprocess.Popen([sys.executable, str(wrapper), "run", str(spec), "--out", str(out), "--engine", "exact"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=environment)


def finished_run(folder: Path) -> Path:
    exact_run(project(folder), folder / "out")
    return folder


def copy_of(finished: Path, tmp_path: Path) -> tuple[Path, Path, dict[str, bytes]]:
    """A byte-for-byte copy of a finished run in ``tmp_path`` (spec, data, output folder) and the
    output's bytes; the copied spec is then changed, so that this month's run differs."""
    for name in ("spec.toml", "data.csv"):
        shutil.copy2(finished / name, tmp_path / name)
    out = tmp_path / "out"
    shutil.copytree(finished / "out", out)
    assert snapshot(out) == snapshot(finished / "out")
    retitled(tmp_path / "spec.toml")
    return tmp_path / "spec.toml", out, snapshot(out)


@pytest.fixture(autouse=True)
def _pages_not_drawn(placeholder_pdf: None) -> None:
    """No check here reads a page of the report: runs here and in the child processes publish a placeholder
    report.pdf (``tests.conftest.PLACEHOLDER_PDF``); each test copies the session's ``last_month`` run."""


@pytest.fixture
def previous(tmp_path: Path, last_month: Path) -> tuple[Path, Path, dict[str, bytes]]:
    return copy_of(last_month, tmp_path)


def recovered(out: Path) -> None:
    """What the next run does before anything else: take the lock, recover, clean; then stop."""
    with publish.publishing(out, frozenset(OUTPUT_FILES)):
        pass


def sums_check(folder: Path) -> subprocess.CompletedProcess[str]:
    # the standard tool (GNU coreutils sha256sum -c) is the reference for the format
    return subprocess.run(["sha256sum", "--strict", "-c", publish.SUMS], cwd=folder, capture_output=True, text=True,
                          check=False)


# ------------------------------------------------------------------------------------ killed runs


@pytest.mark.parametrize("point", ["fit", "render", "write", "sums"])
def test_a_run_killed_before_the_swap_leaves_the_previous_output(tmp_path: Path, previous: tuple, point: str) -> None:
    spec, out, before = previous
    done = child(tmp_path, point, spec, out)
    done.communicate(timeout=120)
    assert done.returncode == -9
    assert snapshot(out) == before
    assert any("-staging-" in name for name in ours_beside(out)), "the killed run's staging folder was expected"
    if point == "fit":
        exact_run(spec, out)  # the lock died with the killed process; the leftovers go
        assert sums_check(out).returncode == 0 and b"Next month" in (out / "report.html").read_bytes()
    else:
        recovered(out)
        assert snapshot(out) == before
    assert ours_beside(out) == []


def test_a_run_killed_just_after_the_swap_leaves_the_new_output(tmp_path: Path, previous: tuple) -> None:
    spec, out, before = previous
    done = child(tmp_path, "exchange", spec, out)
    done.communicate(timeout=120)
    assert done.returncode == -9
    check = sums_check(out)
    assert check.returncode == 0, check.stdout
    assert b"Next month" in (out / "report.html").read_bytes()
    (leftover,) = [tmp_path / name for name in ours_beside(out) if "-staging-" in name]
    assert snapshot(leftover) == before  # the old copy, swapped out whole
    after = snapshot(out)
    recovered(out)
    assert ours_beside(out) == [] and snapshot(out) == after


def test_a_run_killed_between_the_two_renames_is_rolled_back(tmp_path: Path, previous: tuple) -> None:
    """Without an exchange in one step: old folder aside, killed before the new one is in; the next
    run restores the previous folder before doing anything else."""
    spec, out, before = previous
    done = child(tmp_path, "aside", spec, out)
    done.communicate(timeout=120)
    assert done.returncode == -9
    assert not out.exists()
    recovered(out)
    assert snapshot(out) == before
    assert ours_beside(out) == []


def test_the_fallback_without_an_exchange_publishes(previous: tuple, monkeypatch: pytest.MonkeyPatch) -> None:
    spec, out, _ = previous
    monkeypatch.setattr(publish, "_exchange", lambda first, second: False)
    exact_run(spec, out)
    assert b"Next month" in (out / "report.html").read_bytes() and ours_beside(out) == []


def test_leftovers_of_killed_runs_are_cleaned_and_look_alikes_kept(previous: tuple) -> None:
    spec, out, _ = previous
    stale = [out.parent / f".out.reportgen-staging-{'ab12' * 2}", out.parent / ".out.staging-k3_x9q0z"]
    kept = [out.parent / ".out.staging-mine", out.parent / ".other.reportgen-staging-abcdabcd"]
    for folder in stale + kept:
        folder.mkdir()
        (folder / "report.html").write_text("x", encoding="utf-8")
    exact_run(spec, out)
    assert [p.exists() for p in stale + kept] == [False, False, True, True]


# ------------------------------------------------------------------------------------------ the lock


def test_a_second_run_into_the_same_folder_is_refused_naming_the_first(tmp_path: Path, previous: tuple) -> None:
    spec, out, before = previous
    ready = tmp_path / "ready"
    first = child(tmp_path, "wait", spec, out, REPORTGEN_TEST_READY=str(ready))
    try:
        deadline = time.monotonic() + 90
        while not ready.exists() and first.poll() is None and time.monotonic() < deadline:
            time.sleep(0.1)
        assert ready.exists(), first.communicate()[1]
        result = invoke("run", spec, "--out", out, "--engine", "exact")
        assert result.exit_code == 2
        assert f"another reportgen run is writing this folder (pid {first.pid}: " in result.stderr
        assert "wrapper.py run" in result.stderr and len(result.stderr.splitlines()) == 1
        assert snapshot(out) == before
    finally:
        first.kill()
        first.communicate(timeout=30)


def test_the_lock_sits_beside_the_folder_and_is_removed_after(tmp_path: Path) -> None:
    out = tmp_path / "out"
    with publish.publishing(out, frozenset(OUTPUT_FILES)) as publication:
        lock = json.loads((tmp_path / ".out.reportgen.lock").read_text(encoding="utf-8"))
        assert lock["pid"] == os.getpid() and lock["command"] == sys.argv
        (publication.staging / "report.html").write_text("new", encoding="utf-8")
        publication.commit()
    assert sorted(os.listdir(tmp_path)) == ["out"]
    assert sorted(os.listdir(out)) == ["SHA256SUMS", "report.html"]


# -------------------------------------------------------------------------- refusals, causes, folders


def test_a_dangling_symlink_is_refused_and_nothing_created(tmp_path: Path) -> None:
    spec = project(tmp_path)
    (tmp_path / "link").symlink_to(tmp_path / "nonexistent" / "target")
    for out in (tmp_path / "link", tmp_path / "link" / "sub"):
        result = invoke("run", spec, "--out", out, "--engine", "exact")
        assert result.exit_code == 2
        assert f"{tmp_path / 'link'}: is a symbolic link to {tmp_path / 'nonexistent' / 'target'}, which does " \
               "not exist" in result.stderr
    assert not (tmp_path / "nonexistent").exists()
    assert sorted(os.listdir(tmp_path)) == ["data.csv", "link", "spec.toml"]


def test_a_link_to_a_real_folder_publishes_into_that_folder(tmp_path: Path) -> None:
    spec = project(tmp_path)
    (tmp_path / "real").mkdir()
    (tmp_path / "link").symlink_to(tmp_path / "real")
    exact_run(spec, tmp_path / "link")
    assert (tmp_path / "link").is_symlink() and (tmp_path / "real" / "report.pdf").is_file()


def test_files_reportgen_did_not_write_are_listed_and_kept(previous: tuple) -> None:
    spec, out, before = previous
    (out / "notes.txt").write_text("mine", encoding="utf-8")
    (out / "draws").mkdir()
    (out / "draws" / "pair.nc").write_bytes(b"draws of an earlier run: ours")
    (out / "sub").mkdir()
    (out / "sub" / "keep.md").write_text("also mine", encoding="utf-8")
    (out / "empty").mkdir()
    expected = {**before, "notes.txt": b"mine", "draws/pair.nc": b"draws of an earlier run: ours",
                "sub/keep.md": b"also mine"}
    result = invoke("run", spec, "--out", out, "--engine", "exact")
    assert result.exit_code == 2
    assert "holds files that reportgen did not write (empty/, notes.txt, sub/keep.md); reportgen replaces the " \
           "whole folder" in result.stderr
    assert snapshot(out) == expected and (out / "empty").is_dir()
    assert ours_beside(out) == []


def test_files_named_in_the_folders_sha256sums_count_as_ours(previous: tuple) -> None:
    spec, out, _ = previous
    (out / "extra.csv").write_text("an output of an older version", encoding="utf-8")
    with (out / publish.SUMS).open("a", encoding="utf-8") as handle:
        handle.write(f"{'0' * 64}  extra.csv\n")
    exact_run(spec, out)
    assert not (out / "extra.csv").exists()


@pytest.mark.parametrize("where", ["exchange", "rename"])
def test_a_rename_that_fails_says_the_real_cause(previous: tuple, monkeypatch: pytest.MonkeyPatch,
                                                 where: str) -> None:
    spec, out, before = previous

    def cross_device(first: Path, second: Path) -> None:
        raise OSError(errno.EXDEV, os.strerror(errno.EXDEV), str(first), None, str(second))

    if where == "exchange":
        monkeypatch.setattr(publish, "_exchange", cross_device)
    else:
        monkeypatch.setattr(publish, "_exchange", lambda first, second: False)
        monkeypatch.setattr(publish, "_move", cross_device)
    result = invoke("run", spec, "--out", out, "--engine", "exact")
    assert result.exit_code == 2
    assert "could not publish the outputs: " in result.stderr
    assert "is on another filesystem than" in result.stderr and "permissions" not in result.stderr
    assert snapshot(out) == before and ours_beside(out) == []


def test_placeholders_in_out_come_from_the_report_date() -> None:
    day = dt.date(2026, 11, 30)
    assert publish.resolve_out(Path("runs/{period}/x-{date}"), day) == Path("runs/2026-11/x-2026-11-30")
    assert publish.resolve_out(Path("plain{"), day) == Path("plain{")
    with pytest.raises(OutputError, match=r"runs/\{month\}: --out holds the placeholder \{month\}, which reportgen"):
        publish.resolve_out(Path("runs/{month}"), day)


def test_run_and_demo_fill_the_placeholders(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    spec = project(tmp_path)  # report date 2026-01-15
    exact_run(spec, tmp_path / "runs" / "{period}")
    assert (tmp_path / "runs" / "2026-01" / "report.pdf").is_file()
    result = invoke("run", spec, "--out", tmp_path / "{month}", "--engine", "exact")
    assert result.exit_code == 2 and "placeholder {month}" in result.stderr and not (tmp_path / "{month}").exists()
    seen: list[Path] = []

    def run(spec: object, out: Path, **kwargs: object) -> None:
        seen.append(out)
        raise OutputError("stop here")

    monkeypatch.setattr("reportgen.runner.run", run)
    invoke("demo", "--out", tmp_path / "demo-{date}")
    # the demo's monthly runs go into one parent folder, named from the latest month's report date
    assert len(seen) == 1 and seen[0].parent.name == "demo-2026-11-30" and "{" not in str(seen[0])


# ------------------------------------------------------------------------------------- mount points


@pytest.fixture
def mount_point(tmp_path: Path) -> Path:
    folder = tmp_path / "volume"
    folder.mkdir()
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=64m", "tmpfs", str(folder)], capture_output=True,
                          check=False)
    if done.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here ({done.stderr.decode(errors='replace').strip()}); needs root")
    yield folder
    subprocess.run(["umount", "-l", str(folder)], check=False)


def test_a_mount_point_is_published_inside_itself(previous: tuple, mount_point: Path) -> None:
    spec, out, before = previous
    shutil.copytree(out, mount_point, dirs_exist_ok=True)
    assert publish.is_mount_point(mount_point) and snapshot(mount_point) == before
    exact_run(spec, mount_point)
    assert sorted(os.listdir(mount_point)) == sorted(OUTPUT_FILES)
    assert sums_check(mount_point).returncode == 0 and b"Next month" in (mount_point / "report.html").read_bytes()
    assert not [p for p in mount_point.parent.iterdir() if p.name.startswith(".")]  # nothing staged outside


@pytest.mark.parametrize("point", ["move-3", "move-9"], ids=["moving-old-aside", "moving-new-in"])
def test_a_mount_point_publish_killed_midway_is_rolled_back(tmp_path: Path, previous: tuple, mount_point: Path,
                                                            point: str) -> None:
    """Six old entries go aside (moves 1 to 6), then six new ones come in (7 to 12)."""
    spec, out, before = previous
    shutil.copytree(out, mount_point, dirs_exist_ok=True)
    done = child(tmp_path, point, spec, mount_point)
    done.communicate(timeout=120)
    assert done.returncode == -9
    assert (mount_point / ".reportgen-journal.json").is_file() and snapshot(mount_point) != before
    recovered(mount_point)
    assert snapshot(mount_point) == before
    assert sorted(os.listdir(mount_point)) == sorted(OUTPUT_FILES)


# ----------------------------------------------------------------------------- SHA256SUMS and run.log


def test_sha256sums_passes_the_standard_check_and_catches_a_change(previous: tuple) -> None:
    _, out, before = previous
    listed = [line.split("  ", 1)[1] for line in (out / publish.SUMS).read_text(encoding="utf-8").splitlines()]
    assert listed == sorted(set(before) - {publish.SUMS})
    assert sums_check(out).returncode == 0
    (out / "results.csv").write_bytes((out / "results.csv").read_bytes() + b"\n")
    failed = sums_check(out)
    assert failed.returncode == 1 and "results.csv: FAILED" in failed.stdout


def test_sha256sums_lists_the_draws_and_the_log(tmp_path: Path) -> None:
    (tmp_path / "draws").mkdir()
    (tmp_path / "draws" / "a_vs_b.nc").write_bytes(b"\x00netcdf")
    (tmp_path / "run.log").write_text("{}\n", encoding="utf-8")
    (tmp_path / "report.html").write_text("<p>", encoding="utf-8")
    publish.write_sums(tmp_path)
    names = [line.split("  ")[1] for line in (tmp_path / publish.SUMS).read_text(encoding="utf-8").splitlines()]
    assert names == ["draws/a_vs_b.nc", "report.html", "run.log"]
    assert sums_check(tmp_path).returncode == 0


def test_run_log_is_json_lines_with_the_four_keys(previous: tuple) -> None:
    _, out, _ = previous
    lines = [json.loads(line) for line in (out / "run.log").read_text(encoding="utf-8").splitlines()]
    assert all({"time", "level", "pair", "event"} <= set(line) for line in lines)
    events = [line["event"] for line in lines]
    assert events[:2] == ["start", "data loaded"] and events[-3:] == ["rendering", "timings", "outputs written"]
    (pair,) = [line for line in lines if line["event"] == "pair done"]
    assert pair["pair"] == "alpha vs b" and pair["status"] == "pass" and pair["seconds"] >= 0
    (timings,) = [line for line in lines if line["event"] == "timings"]
    stages = ("loading", "fitting and summarising", "figures and report sections", "HTML", "PDF")
    assert all(timings[stage] >= 0 for stage in stages)
    assert all(dt.datetime.fromisoformat(line["time"]).tzinfo is not None for line in lines)


def test_a_failed_publish_leaves_no_staging(tmp_path: Path) -> None:
    out = tmp_path / "out"
    with pytest.raises(RuntimeError), publish.publishing(out, frozenset(OUTPUT_FILES)) as publication:
        (publication.staging / "report.html").write_text("half", encoding="utf-8")
        raise RuntimeError("stopped")
    assert sorted(os.listdir(tmp_path)) == []
