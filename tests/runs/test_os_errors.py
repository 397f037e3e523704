"""The operating system's refusals are user mistakes: one stderr line naming the path, exit 2.

A path component longer than the file system allows, a loop of symbolic links, a NUL byte, the
home folder of a user who does not exist, a full disk while the run folder is written, a
read-only run folder for ``castline report``, and standard output closed or on a full device:
each ends in one line starting ``castline:``, no traceback. Once the run folder has landed, a
failure to print its summary leaves the exit code 0. Most cases run the command as a user
does, in a subprocess; the full disk and the read-only folder are made by replacing the
system's answer in this process (as root, chmod does not stop a write). Plumbing tests on the
invented tiny data of conftest: no figure is a reference value.
"""

from __future__ import annotations

import errno
import os
import pwd
import shutil
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest
import yaml
from conftest import ROOT, run_cli, tiny_data, write_tiny_spec

import pipeline

LONG = "n" * 300   # one path component over the 255 bytes Linux file systems allow
NO_USER = "castline-no-such-user"


def castline(*args: str, cwd: Path, stdout=subprocess.PIPE, shell_suffix: str = "") -> subprocess.CompletedProcess:
    """Run ``python -m pipeline ARGS`` in a subprocess as a user does (``shell_suffix``: a
    redirection, through the shell)."""
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, [str(ROOT), os.environ.get("PYTHONPATH")])))
    command = [sys.executable, "-m", "pipeline", *args]
    if shell_suffix:
        command = ["sh", "-c", 'exec "$@" ' + shell_suffix, "sh", *command]
    return subprocess.run(command, cwd=cwd, env=env, stdout=stdout, stderr=subprocess.PIPE, text=True,
                          check=False)


def one_line(done: subprocess.CompletedProcess | tuple, code: int = 2) -> str:
    """Assert the command ended with ``code`` and exactly one stderr line starting
    'castline: ', no traceback; return that line."""
    returned, err = (done.returncode, done.stderr) if hasattr(done, "returncode") else (done[0], done[2])
    lines = err.splitlines()
    assert returned == code, err
    assert "Traceback" not in err and len(lines) == 1 and lines[0].startswith("castline: "), err
    return lines[0]


@pytest.fixture(scope="module")
def tiny(tmp_path_factory) -> Path:
    """The tiny spec's folder, with one run already landed in runs/."""
    folder = tmp_path_factory.mktemp("os_errors")
    spec = write_tiny_spec(folder, tiny_data(), actuals_to="2021-12")
    pipeline.run(spec)
    return folder


def _spec_with(folder: Path, name: str, section: str, key: str, value: str) -> Path:
    document = yaml.safe_load((folder / "spec.yaml").read_text(encoding="utf-8"))
    document[section][key] = value
    path = folder / f"{name}.yaml"
    path.write_text(yaml.safe_dump(document, sort_keys=False), encoding="utf-8")
    return path


def _loop(folder: Path) -> Path:
    """Return a path inside a loop of two symbolic links, made in folder."""
    first, second = folder / "loop-a", folder / "loop-b"
    if not first.is_symlink():
        first.symlink_to(second)
        second.symlink_to(first)
    return first / "inside"


def _no_such_user() -> None:
    try:
        pwd.getpwnam(NO_USER)
    except KeyError:
        return
    pytest.skip(f"a user named {NO_USER} exists on this machine")


def _only_run(folder: Path) -> Path:
    return next(p for p in (folder / "runs").iterdir() if p.name.startswith("run-"))


# ------------------------------------------------------------ paths the system cannot name

def test_a_spec_path_with_a_component_over_255_characters(tiny):
    line = one_line(castline("check", f"{LONG}.yaml", cwd=tiny))
    assert LONG in line and "File name too long" in line


def test_a_spec_inside_a_loop_of_symbolic_links(tiny):
    line = one_line(castline("check", str(_loop(tiny) / "spec.yaml"), cwd=tiny))
    assert "loop-a/inside/spec.yaml" in line and "Too many levels of symbolic links" in line


def test_a_spec_in_the_home_folder_of_a_user_who_does_not_exist(tiny):
    _no_such_user()
    line = one_line(castline("check", f"~{NO_USER}/spec.yaml", cwd=tiny))
    assert f"~{NO_USER}/spec.yaml" in line and f"no user '{NO_USER}'" in line


@pytest.mark.parametrize(("section", "key", "value", "words"), [
    ("input", "file", "data\0.csv", "the path holds a NUL byte"),
    ("input", "file", f"{LONG}.csv", "File name too long"),
    ("output", "folder", f"~{NO_USER}/runs", f"no user '{NO_USER}'"),
    ("output", "folder", "loop-a/runs", "Too many levels of symbolic links"),
    ("output", "ledger", f"{LONG}.sqlite", "File name too long"),
])
def test_a_spec_naming_a_path_the_system_refuses(tiny, section, key, value, words):
    _no_such_user()
    _loop(tiny)
    spec = _spec_with(tiny, f"refused-{section}-{key}", section, key, value)
    line = one_line(castline("run", spec.name, cwd=tiny))
    shown = value.replace("\0", "\\x00").split("/")[0][:40]
    assert line.startswith(f"castline: {spec.name}:") and f"{section}.{key}: {words}" in line, line
    assert shown in line
    assert len(list((tiny / "runs").glob("run-*"))) == 1   # nothing more landed


@pytest.mark.parametrize("command", [
    ["run", "spec.yaml", "--output-folder", "loop-a/runs"],
    ["check", "spec.yaml", "--problems", f"{LONG}.csv"],
    ["report", LONG],
    ["forecast", "loop-a/inside", "data.csv"],
    ["history", "--ledger", f"{LONG}.sqlite"],
    ["init", "data.csv", "--spec-file", "loop-a/inside/new.yaml"],
])
def test_an_option_naming_a_path_the_system_refuses(tiny, command):
    _loop(tiny)
    line = one_line(castline(*command, cwd=tiny))
    assert ("loop-a" in line and "Too many levels of symbolic links" in line) or \
        (LONG in line and "File name too long" in line), line
    assert len(list((tiny / "runs").glob("run-*"))) == 1 and not (tiny / "new.yaml").exists()


def test_a_nul_byte_in_a_path_given_on_the_command_line(tiny, monkeypatch):
    # A program's arguments cannot hold a NUL byte; cli.main can be handed one.
    monkeypatch.chdir(tiny)
    for command in (["check", "spec.yaml\0"], ["report", "runs\0"], ["forecast", "m\0.json", "data.csv"],
                    ["check", "spec.yaml", "--problems", "p\0.csv"]):
        line = one_line(run_cli(command))
        assert "\\x00" in line and "the path holds a NUL byte" in line and "\0" not in line, line


# ------------------------------------------------------------ a full disk, a read-only folder

def test_a_full_disk_while_the_run_folder_is_written_leaves_no_folder_and_no_ledger_row(tiny, monkeypatch):
    import pipeline.record.run_folder as run_folder
    monkeypatch.chdir(tiny)
    ledger_file = tiny / "runs" / "ledger.sqlite"
    with sqlite3.connect(ledger_file) as conn:
        before = conn.execute("SELECT count(*) FROM runs").fetchone()[0]
    written = run_folder.write_csvs

    def full(tables):
        written(tables[:2])
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))   # as a write() on a full disk: no file named
    monkeypatch.setattr(run_folder, "write_csvs", full)
    line = one_line(run_cli(["run", "spec.yaml"]))
    assert line == f"castline: {tiny / 'runs'}: cannot write the run folder; nothing was recorded: " \
                   "No space left on device"
    assert [p.name for p in (tiny / "runs").iterdir() if p.name.startswith((".incomplete", "run-"))] == \
        [_only_run(tiny).name]
    with sqlite3.connect(ledger_file) as conn:
        assert conn.execute("SELECT count(*) FROM runs").fetchone()[0] == before


def test_a_full_disk_while_a_page_is_written_names_the_output_folder(tiny, monkeypatch):
    monkeypatch.chdir(tiny)
    before = sorted(p.name for p in (tiny / "runs").iterdir())
    real = Path.write_text

    def full(self, *args, **kwargs):
        if self.name == ".report.html.partial":
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(self))
        return real(self, *args, **kwargs)
    monkeypatch.setattr(Path, "write_text", full)
    line = one_line(run_cli(["run", "spec.yaml"]))
    assert line == f"castline: {tiny / 'runs'}: cannot write the run folder; nothing was recorded: " \
                   "No space left on device"
    assert sorted(p.name for p in (tiny / "runs").iterdir()) == before


def test_report_on_a_read_only_run_folder(tiny, monkeypatch):
    folder = _only_run(tiny)
    before = (folder / "report.html").read_bytes()
    real = Path.write_text

    def read_only(self, *args, **kwargs):
        if self.parent == folder:
            raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(self))
        return real(self, *args, **kwargs)
    monkeypatch.setattr(Path, "write_text", read_only)
    line = one_line(run_cli(["report", str(folder)]))
    assert line.startswith(f"castline: {folder}/") and line.endswith("Read-only file system"), line
    assert (folder / "report.html").read_bytes() == before
    assert not [p for p in folder.iterdir() if p.name.endswith(".partial")]


def test_report_on_a_folder_without_write_permission(tiny, tmp_path):
    if os.geteuid() == 0:
        pytest.skip("run as root, whom a folder's permissions do not stop from writing")
    folder = tmp_path / "run"
    shutil.copytree(_only_run(tiny), folder)
    folder.chmod(0o555)
    try:
        line = one_line(castline("report", str(folder), cwd=tmp_path))
    finally:
        folder.chmod(0o755)
    assert str(folder) in line and "Permission denied" in line


# ------------------------------------------------------------ standard output

def test_a_run_printing_to_a_full_device_lands_and_exits_0(tiny):
    if not Path("/dev/full").exists():
        pytest.skip("no /dev/full on this machine")
    before = {p.name for p in (tiny / "runs").glob("run-*")}
    with open("/dev/full", "w") as full:
        done = castline("run", "spec.yaml", cwd=tiny, stdout=full)
    line = one_line(done, code=0)
    landed = {p.name for p in (tiny / "runs").glob("run-*")} - before
    assert len(landed) == 1 and (tiny / "runs" / landed.pop() / "report.html").is_file()
    assert "was written, but its summary could not be printed" in line and "No space left on device" in line


def test_a_run_with_standard_output_closed_lands_and_exits_0(tiny):
    before = {p.name for p in (tiny / "runs").glob("run-*")}
    done = castline("run", "spec.yaml", cwd=tiny, stdout=None, shell_suffix=">&-")
    assert done.returncode == 0 and done.stderr == "", done.stderr
    landed = {p.name for p in (tiny / "runs").glob("run-*")} - before
    assert len(landed) == 1 and (tiny / "runs" / next(iter(landed)) / "summary.md").is_file()
    with sqlite3.connect(tiny / "runs" / "ledger.sqlite") as conn:
        assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"


def test_a_check_printing_to_a_full_device_is_one_line(tiny):
    if not Path("/dev/full").exists():
        pytest.skip("no /dev/full on this machine")
    with open("/dev/full", "w") as full:
        done = castline("check", "spec.yaml", cwd=tiny, stdout=full)
    assert one_line(done) == "castline: standard output: cannot print the output: No space left on device"


class _Failing:
    """A standard output that takes nothing (a full device)."""

    def write(self, text):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    def flush(self):
        pass


def test_a_landed_run_whose_summary_cannot_be_printed_exits_0_in_this_process(tiny, monkeypatch, capsys):
    from pipeline import cli
    monkeypatch.chdir(tiny)
    before = {p.name for p in (tiny / "runs").glob("run-*")}
    monkeypatch.setattr(sys, "stdout", _Failing())
    code = cli.main(["run", "spec.yaml"])
    err = capsys.readouterr().err
    landed = {p.name for p in (tiny / "runs").glob("run-*")} - before
    assert code == 0 and len(landed) == 1, err
    assert err.splitlines() == [f"castline: the run folder {tiny / 'runs' / landed.pop()} was written, "
                                "but its summary could not be printed: standard output: No space left on device"]


def test_a_closed_standard_output_is_held_so_no_file_takes_its_number(tmp_path):
    # With descriptor 1 closed, the next file opened would be given it, and anything written
    # to "standard output" would land in that file.
    program = ("import sys; from pipeline.__main__ import _hold_closed_streams; _hold_closed_streams(); "
               "handle = open('opened.txt', 'w'); sys.stderr.write(str(handle.fileno()))")
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    done = subprocess.run(["sh", "-c", 'exec "$@" >&-', "sh", sys.executable, "-c", program], cwd=tmp_path,
                          env=env, stderr=subprocess.PIPE, text=True, check=False)
    assert done.returncode == 0 and int(done.stderr) > 2, done.stderr
