"""Faults while products are written: killed and stopped writers, concurrent runs, a full disk, an
unwritable folder, a damaged product chunk.

The faults are real: child processes run the ``unmix`` entry point (tests/_fault_child.py) and are
killed with SIGKILL or SIGTERM by the operating system, or run under a file size limit
(``setrlimit(RLIMIT_FSIZE)``, with SIGXFSZ ignored so a write past the limit fails with EFBIG, which
is how POSIX documents the limit; a full disk fails the same way with ENOSPC). What is checked is
the contract of README "What is guaranteed": exit status 2 (143 for SIGTERM) and one line on
stderr, no product and no partial set, no hidden temporary or claim file left for long.
"""

from __future__ import annotations

import errno
import os
import signal
import subprocess
import sys
from pathlib import Path

import h5py
import numpy as np
import pytest
from conftest import BANDS

from unmix.cli.main import main
from unmix.errors import StackReadError
from unmix.io.products import open_product, write_netcdf

ROOT = Path(__file__).resolve().parents[1]
CHILD = Path(__file__).with_name("_fault_child.py")


def fractions_args(info, library, out, *extra):
    return ["fractions", str(info.folder), "--library", str(library), "--sensor", "landsat-8-oli",
            "--band-names", ",".join(BANDS), "--scale", "0.0001", "--out", str(out), *map(str, extra)]


def child_env(**faults):
    env = {k: v for k, v in os.environ.items() if not k.startswith("UNMIX_FAULT_")}
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT), env.get("PYTHONPATH", "")]).rstrip(os.pathsep)
    env.update({f"UNMIX_FAULT_{k.upper()}": str(v) for k, v in faults.items()})
    return env


def start(args, **faults):
    return subprocess.Popen([sys.executable, str(CHILD), *args], env=child_env(**faults), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)


def run_child(args, **faults):
    proc = start(args, **faults)
    out, err = proc.communicate(timeout=300)
    return proc.returncode, out, err


def wait_paused(proc):
    """Read the child's stdout until it reports the temporary file it paused in."""
    line = proc.stdout.readline()
    assert line.startswith("paused "), (line, proc.stderr.read() if proc.poll() is not None else "")
    return Path(line.split(" ", 1)[1].strip())


def one_error_line(err):
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1, err
    assert "Traceback" not in err
    return lines[0]


def hidden(folder):
    return sorted(p.name for p in Path(folder).iterdir() if p.name.startswith(".")) if Path(folder).exists() else []


def visible(folder):
    return sorted(p.name for p in Path(folder).iterdir() if not p.name.startswith(".")) if Path(folder).exists() else []


@pytest.fixture
def job(make_stack, make_library, tmp_path):
    """A small stack and library, and the output folder of the run."""
    return make_stack(), make_library(), tmp_path / "out"


def test_killed_writer_leaves_no_product_and_next_run_cleans_up(job, capsys):
    info, library, out = job
    proc = start(fractions_args(info, library, out), pause=out / "never")
    tmp = wait_paused(proc)
    assert tmp.exists() and tmp.parent == out and tmp.name.startswith(".fractions.nc.")
    assert (out / ".fractions.nc.claim").exists()
    proc.send_signal(signal.SIGKILL)
    proc.communicate(timeout=60)
    assert proc.returncode == -signal.SIGKILL
    assert visible(out) == []  # no product appeared
    assert ".fractions.nc.claim" in hidden(out) and tmp.name in hidden(out)  # nobody could clean up
    # the next run finds the claim of a dead process: it removes it and the temporary file, and succeeds
    assert main(fractions_args(info, library, out)) == 0, capsys.readouterr().err
    assert visible(out) == ["dates.csv", "fractions.nc"] and hidden(out) == []
    assert open_product(out / "fractions.nc")["fractions"].shape == (4, 3, 24, 20)


def test_sigterm_mid_write_removes_everything(job):
    info, library, out = job
    proc = start(fractions_args(info, library, out, "--cog"), pause=out / "never")
    wait_paused(proc)
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 143  # 128 + SIGTERM, the shell's convention
    assert "SIGTERM" in one_error_line(err)
    assert visible(out) == [] and hidden(out) == []


def test_concurrent_run_fails_at_once_naming_the_other(job):
    info, library, out = job
    first = start(fractions_args(info, library, out), pause=out.parent / "go")
    wait_paused(first)
    code, _, err = run_child(fractions_args(info, library, out))
    assert code == 2
    line = one_error_line(err)
    assert "fractions.nc is being written by another run" in line and f"pid {first.pid}" in line
    (out.parent / "go").touch()
    _, err = first.communicate(timeout=120)
    assert first.returncode == 0, err
    assert visible(out) == ["dates.csv", "fractions.nc"] and hidden(out) == []


def test_two_runs_started_together_give_one_product(job):
    info, library, out = job
    procs = [start(fractions_args(info, library, out)) for _ in range(2)]
    results = [(p.communicate(timeout=300), p.returncode) for p in procs]
    assert sorted(code for _, code in results) == [0, 2], results
    (_, err), _ = next(r for r in results if r[1] == 2)
    line = one_error_line(err)
    assert "being written by another run" in line or "exists already" in line
    assert visible(out) == ["dates.csv", "fractions.nc"] and hidden(out) == []


@pytest.mark.parametrize("limit", [2_000, 60_000])  # while netCDF4 defines the file / while chunks are stored
def test_file_size_limit_netcdf(job, limit):
    info, library, out = job
    code, _, err = run_child(fractions_args(info, library, out), fsize=limit)
    assert code == 2
    line = one_error_line(err)
    assert line.startswith("unmix: error: cannot write") and "fractions.nc" in line and "ulimit" in line
    assert os.strerror(errno.EFBIG) in line or "HDF error" in line
    assert visible(out) == [] and hidden(out) == []


def test_file_size_limit_during_cog_leaves_no_set(job):
    info, library, out = job
    code, _, err = run_child(fractions_args(info, library, out, "--cog"), fsize_at_cog=3_000)
    assert code == 2
    line = one_error_line(err)  # libtiff's own "File too large" line is held back
    assert "fractions_" in line and ".tif" in line and "ulimit" in line
    assert visible(out) == [] and hidden(out) == []  # fractions.nc was complete, but not the set


def test_failed_overwrite_keeps_the_old_set(job, capsys):
    info, library, out = job
    assert main(fractions_args(info, library, out, "--cog")) == 0, capsys.readouterr().err
    before = {name: (out / name).read_bytes() for name in visible(out)}
    assert len(before) == 5  # fractions.nc, dates.csv and three COGs
    code, _, err = run_child(fractions_args(info, library, out, "--cog", "--overwrite", "--constraint",
                                            "sum-to-one"), fsize_at_cog=3_000)
    assert code == 2, err
    one_error_line(err)
    assert {name: (out / name).read_bytes() for name in visible(out)} == before and hidden(out) == []


def _unwritable_folders(tmp_path):
    """Folders that cannot be written even as root (the CI runs as root, where chmod does not stop
    writes): a path under a regular file (ENOTDIR), and /sys (read-only for everyone in a container)."""
    regular = tmp_path / "a_file"
    regular.write_text("x")
    folders = [("under a file", regular / "out")]
    try:
        fd = os.open("/sys/.unmix-probe", os.O_WRONLY | os.O_CREAT | os.O_EXCL)
    except OSError:
        folders.append(("read-only", Path("/sys")))
    else:  # pragma: no cover - a machine where /sys is writable: nothing to test there
        os.close(fd)
        os.unlink("/sys/.unmix-probe")
    return folders


@pytest.mark.parametrize("command", ["fractions", "trends", "report"])
def test_unwritable_output_stops_before_any_input_is_read(tmp_path, capsys, command):
    missing_input = tmp_path / "no_such_input"  # reading it would fail with another message
    for what, folder in _unwritable_folders(tmp_path):
        if command == "fractions":
            args = ["fractions", str(missing_input), "--library", str(missing_input), "--sensor", "landsat-8-oli",
                    "--out", str(folder)]
        else:
            args = [command, str(missing_input), "--out", str(folder)]
        assert main(args) == 2, what
        line = one_error_line(capsys.readouterr().err)
        assert line.startswith("unmix: error: cannot") and str(folder) in line, (what, line)
        assert "no_such_input" not in line


def _damage_one_chunk(path, variable):
    """Overwrite the stored bytes of the first chunk of ``variable`` (location from h5py's chunk index)."""
    with h5py.File(path, "r") as f:
        info = f[variable].id.get_chunk_info(0)
    with open(path, "r+b") as f:
        f.seek(info.byte_offset)
        f.write(b"\xff" * info.size)
    return info


def test_damaged_chunk_is_named_by_file_and_variable(tmp_path, capsys):
    import pandas as pd
    import xarray as xr

    rng = np.random.default_rng(3)
    f = rng.uniform(0, 1, (12, 2, 6, 5)).astype(np.float32)
    ds = xr.Dataset({"fractions": (("time", "endmember", "y", "x"), f)},
                    coords={"time": pd.date_range("2015-01-01", periods=12, freq="QS"), "endmember": ["a", "b"],
                            "y": 4100000.0 - 30.0 * (np.arange(6) + 0.5), "x": 500000.0 + 30.0 * (np.arange(5) + 0.5)})
    path = write_netcdf(ds, tmp_path / "fractions.nc")
    _damage_one_chunk(path, "fractions")
    product = open_product(path)  # opening reads metadata only: fine
    with pytest.raises(StackReadError, match=r"'fractions' of .*fractions\.nc \(time 0-1"):
        product["fractions"].values
    code = main(["trends", str(path), "--out", str(tmp_path / "t"), "--min-valid", "3"])
    assert code == 2
    line = one_error_line(capsys.readouterr().err)
    assert f"'fractions' of {path}" in line and "write it again" in line
    assert visible(tmp_path / "t") == [] and hidden(tmp_path / "t") == []
