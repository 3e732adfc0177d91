"""Faults end cleanly: a read-only or full file system, SIGINT and SIGTERM during start-up, during
the computation and during the writes. Each ends with one stderr line, the documented status
(2, 130 or 143) and no temporary or partial output."""

from __future__ import annotations

import errno
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest
from robust_kit import make_kit, run_cli, snapshot

import ident.fileio

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def kit(tmp_path_factory) -> Path:
    return make_kit(tmp_path_factory.mktemp("kit"))


def writers(k: Path, out: Path) -> dict[str, list]:
    """Every command that writes, its output inside `out`."""
    return {
        "fit": ["fit", k / "arm.urdf", k / "run.csv", "--method", "ols", "--cutoff", "0", "--quiet", "--out", out / "p.yaml"],
        "check": ["check", k / "arm.urdf", k / "params.yaml", k / "run.csv", "--cutoff", "0", "--quiet", "--report", out / "r.html"],
        "export": ["export", k / "params.yaml", "--urdf", k / "arm.urdf", "--quiet", "--out", out / "id.urdf"],
        "export_json": ["export", k / "params.yaml", "--quiet", "--out", out / "id.json"],
        "payload": ["payload", k / "arm.urdf", k / "params.yaml", k / "run.csv", "--cutoff", "0", "--quiet", "--out", out / "pl.yaml"],
        "simulate": ["simulate", k / "arm.urdf", "--trajectory", k / "traj.csv", "--truth", k / "params.yaml", "--quiet", "--out", out / "s.csv"],
        "logs": ["logs", k / "run.csv", "--cutoff", "0", "--out", out / "samples.csv"],
        "excite": ["excite", k / "arm.urdf", "--config", k / "excite.yaml", "--quiet", "--budget", "1", "--out", out / "ex"],
    }


def _fail_with(code: int):
    def fail(*args, **kwargs):
        raise OSError(code, os.strerror(code), str(args[0]) if args else None)
    return fail


# root ignores permission bits, so a read-only or full file system is simulated where the writers
# meet the OS: creating the temporary file (read-only) or moving it into place (full disk)
@pytest.mark.parametrize("command", ["fit", "check", "export", "export_json", "payload", "simulate", "logs", "excite"])
@pytest.mark.parametrize("fault,patch", [("EROFS", "mkstemp"), ("ENOSPC", "replace")])
def test_write_fault_is_one_line_naming_the_output(kit, tmp_path, capsys, monkeypatch, command, fault, patch):
    out = tmp_path / "out"
    out.mkdir()
    code_no = getattr(errno, fault)
    if patch == "mkstemp":
        monkeypatch.setattr(ident.fileio.tempfile, "mkstemp", _fail_with(code_no))
        monkeypatch.setattr(ident.fileio.tempfile, "mkdtemp", _fail_with(code_no))
    else:
        monkeypatch.setattr(ident.fileio.os, "replace", _fail_with(code_no))
        monkeypatch.setattr(ident.fileio.os, "rename", _fail_with(code_no))
    before = snapshot(kit, tmp_path)
    code, _, err = run_cli(writers(kit, out)[command], capsys)
    lines = err.splitlines()
    assert code == 2 and len(lines) == 1 and "Traceback" not in err, err
    assert os.strerror(code_no) in lines[0] and str(out) in lines[0], lines[0]
    assert snapshot(kit, tmp_path) == before  # no temporary file, no partial folder


def test_real_read_only_mount_where_root_allows(kit, tmp_path, capsys):
    """A read-only tmpfs (needs mount rights; skipped in containers that lack them)."""
    ro = tmp_path / "ro"
    ro.mkdir()
    if subprocess.run(["mount", "-t", "tmpfs", "-o", "ro,size=64k", "tmpfs", str(ro)], capture_output=True).returncode:
        pytest.skip("no rights to mount a tmpfs here")
    try:
        code, _, err = run_cli(writers(kit, ro)["fit"], capsys)
        assert code == 2 and len(err.splitlines()) == 1 and "Read-only file system" in err and str(ro) in err, err
        assert list(ro.iterdir()) == []
    finally:
        subprocess.run(["umount", str(ro)], check=False)


def test_small_full_tmpfs_where_root_allows(kit, tmp_path, capsys):
    """A 16 kB tmpfs fills up while the simulated log is written (skipped without mount rights)."""
    full = tmp_path / "full"
    full.mkdir()
    if subprocess.run(["mount", "-t", "tmpfs", "-o", "size=16k", "tmpfs", str(full)], capture_output=True).returncode:
        pytest.skip("no rights to mount a tmpfs here")
    try:
        code, _, err = run_cli(writers(kit, full)["simulate"], capsys)
        assert code == 2 and len(err.splitlines()) == 1 and "No space left" in err and str(full) in err, err
        assert list(full.iterdir()) == []
    finally:
        subprocess.run(["umount", str(full)], check=False)


# ------------------------------------------------------------------------------ signals

SLOW_WRITE = textwrap.dedent("""
    import os, sys, time
    import ident.fileio as f
    real = f.os.replace
    marker = os.environ["MARKER"]

    def slow_replace(src, dst):
        open(marker, "w").close()   # the temporary file exists now: the parent sends the signal
        time.sleep(60)
        real(src, dst)

    f.os.replace = slow_replace
    from ident.cli import main
    raise SystemExit(main(sys.argv[1:]))
""")


def _start(args, env_extra=None, script=None):
    env = dict(os.environ, PYTHONPATH=str(ROOT), **(env_extra or {}))
    cmd = [sys.executable, "-c", script, *map(str, args)] if script else [sys.executable, "-m", "ident", *map(str, args)]
    return subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, env=env)


def _wait_for(path: Path, proc, timeout=120.0):
    end = time.monotonic() + timeout
    while not path.exists():
        assert proc.poll() is None, proc.stderr.read()
        assert time.monotonic() < end, "the child never reached the write"
        time.sleep(0.05)


SIGNALS = [pytest.param(signal.SIGINT, 130, "interrupted", id="SIGINT"), pytest.param(signal.SIGTERM, 143, "terminated", id="SIGTERM")]


@pytest.mark.parametrize("sig,status,word", SIGNALS)
@pytest.mark.parametrize("command", ["fit", "excite"])
def test_signal_during_a_write_leaves_nothing(kit, tmp_path, sig, status, word, command):
    out = tmp_path / "out"
    out.mkdir()
    marker = tmp_path / "writing"
    proc = _start(writers(kit, out)[command], {"MARKER": str(marker)}, SLOW_WRITE)
    _wait_for(marker, proc)
    assert [p.name.endswith(".part") or ".part." in p.name for p in out.iterdir()] == [True]  # the temporary is there
    proc.send_signal(sig)
    err = proc.communicate(timeout=60)[1]
    assert proc.returncode == status, err
    assert err.splitlines() == [f"ident {command}: {word}"], err
    assert list(out.iterdir()) == []  # no temporary file, no partial folder, no output


COMPUTING = textwrap.dedent("""
    import os, sys
    import ident.progress as p
    real = p.Progress.update
    marker = os.environ["MARKER"]

    def update(self, done, note=""):
        open(marker, "w").close()   # the integration is under way: the parent sends the signal
        real(self, done, note)

    p.Progress.update = update
    from ident.cli import main
    raise SystemExit(main(sys.argv[1:]))
""")


@pytest.mark.parametrize("sig,status,word", SIGNALS)
def test_signal_during_the_computation(kit, tmp_path, sig, status, word):
    """A long simulation (many substeps) is stopped by the signal: one line, status, no output.
    The signal is sent once the first simulated second is done (not after a fixed wait, which a
    loaded machine can spend still importing: then the start-up handler answers instead)."""
    out = tmp_path / "out"
    out.mkdir()
    marker = tmp_path / "computing"
    args = writers(kit, out)["simulate"] + ["--substeps", "4000"]
    proc = _start(args, {"MARKER": str(marker)}, COMPUTING)
    _wait_for(marker, proc)
    proc.send_signal(sig)
    err = proc.communicate(timeout=60)[1]
    assert proc.returncode == status, err
    assert err.splitlines() == [f"ident simulate: {word}"], err
    assert list(out.iterdir()) == []


@pytest.mark.parametrize("sig,status,word", SIGNALS)
def test_signal_during_start_up(kit, tmp_path, sig, status, word):
    """During the imports: the start-up handler prints one line and leaves at once."""
    script = textwrap.dedent("""
        import os, sys
        open(os.environ["MARKER"], "w").close()
        import time; time.sleep(60)
    """)
    marker = tmp_path / "started"
    # `ident/__init__.py` installs the start-up handler before its heavy imports; the sitecustomize
    # below stands in for a slow import right after that point
    site = tmp_path / "site"
    site.mkdir()
    (site / "slow_import.py").write_text(script)
    boot = "import ident.interrupts as i, sys; sys.argv[0] = 'ident'; i.install_startup(); import slow_import"
    env = dict(os.environ, PYTHONPATH=f"{ROOT}{os.pathsep}{site}", MARKER=str(marker))
    proc = subprocess.Popen([sys.executable, "-c", boot], stderr=subprocess.PIPE, text=True, env=env)
    _wait_for(marker, proc)
    proc.send_signal(sig)
    err = proc.communicate(timeout=30)[1]
    assert proc.returncode == status and err.splitlines() == [f"ident: {word}"], err


def test_start_up_handler_is_installed_by_the_package_for_the_command(tmp_path):
    """`python -m ident` installs the start-up handler while ident/__init__ runs, before numpy."""
    probe = ("import signal, sys; sys.orig_argv[:] = [sys.executable, '-m', 'ident']; import ident.interrupts as i; "
             "import ident; print(signal.getsignal(signal.SIGTERM) is i._leave_now)")
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, env=env, timeout=120)
    assert out.stdout.strip() == "True", out.stderr
