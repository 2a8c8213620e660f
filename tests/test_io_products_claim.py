"""Tests of unmix.io.products.claim: exclusive claims, stale clean-up, sets committed all or nothing.

Process liveness is checked against processes the tests start and end themselves (the operating
system's view of a pid, via subprocess); file states are read back with os / pathlib.
"""

from __future__ import annotations

import errno
import json
import os
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

from unmix.errors import OutputExistsError, ProductClaimedError, ProductWriteError
from unmix.io.products import atomic_path
from unmix.io.products import claim as claim_module
from unmix.io.products.claim import STALE_AFTER_S, ProductSet, remove_stale


def dead_pid() -> int:
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def host_token() -> str:
    return claim_module._host()


def write_claim(folder: Path, name: str, **info) -> Path:
    path = folder / f".{name}.claim"
    path.write_text(json.dumps(info), encoding="utf-8")
    return path


def test_second_claim_fails_naming_the_holder_then_finds_the_product(tmp_path):
    target = tmp_path / "p.nc"
    with ProductSet([target], command="unmix fractions a") as first:
        assert (tmp_path / ".p.nc.claim").exists()
        holder = json.loads((tmp_path / ".p.nc.claim").read_text())
        assert holder["pid"] == os.getpid() and holder["host"] == socket.gethostname()
        with pytest.raises(ProductClaimedError, match=rf"p\.nc is being written by another run .*pid {os.getpid()}"):
            ProductSet([target]).claim()
        with first.writing(target) as tmp:
            tmp.write_text("done")
        assert not target.exists()  # committed only when the set is
    assert target.read_text() == "done" and sorted(p.name for p in tmp_path.iterdir()) == ["p.nc"]
    with pytest.raises(OutputExistsError, match="exists already"):
        ProductSet([target]).claim()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["p.nc"]  # a failed claim leaves nothing behind


def test_files_of_dead_runs_are_removed_live_ones_kept(tmp_path):
    pid = dead_pid()
    dead_claim = write_claim(tmp_path, "a.nc", host=socket.gethostname(), pid=pid, pid_start=None)
    dead_tmp = tmp_path / f".a.nc.{host_token()}.{pid}.0123abcd.partial"
    dead_stage = tmp_path / f".b.tif.{host_token()}.{pid}.0123abcd.stage.partial"
    live_tmp = tmp_path / f".c.nc.{host_token()}.{os.getppid()}.0123abcd.partial"  # our parent runs
    young_remote = write_claim(tmp_path, "d.nc", host="elsewhere", pid=1, started="now")
    old_remote = write_claim(tmp_path, "e.nc", host="elsewhere", pid=1, started="long ago")
    old_partial = tmp_path / ".f.nc.0123456789ab.partial"  # an earlier unmix's temporary name
    for p in (dead_tmp, dead_stage, live_tmp, old_partial):
        p.write_text("x")
    long_ago = time.time() - STALE_AFTER_S - 60
    for p in (old_remote, old_partial):
        os.utime(p, (long_ago, long_ago))
    unrelated = tmp_path / ".hidden_config"
    unrelated.write_text("x")

    removed = remove_stale(tmp_path)
    assert sorted(p.name for p in removed) == sorted(
        p.name for p in (dead_claim, dead_tmp, dead_stage, old_remote, old_partial))
    assert live_tmp.exists() and young_remote.exists() and unrelated.exists()
    with pytest.raises(ProductClaimedError, match="host elsewhere"):
        ProductSet([tmp_path / "d.nc"]).claim()


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="process start times come from Linux /proc")
def test_a_reused_pid_does_not_keep_a_claim_alive(tmp_path):
    parent = os.getppid()
    started = claim_module._process_start(parent)
    write_claim(tmp_path, "a.nc", host=socket.gethostname(), pid=parent, pid_start=started)
    write_claim(tmp_path, "b.nc", host=socket.gethostname(), pid=parent, pid_start=str(int(started) + 1))
    assert [p.name for p in remove_stale(tmp_path)] == [".b.nc.claim"]  # the pid now belongs to another process


def test_a_set_is_committed_all_or_nothing(tmp_path):
    a, b = tmp_path / "a.nc", tmp_path / "b.tif"
    with pytest.raises(OutputExistsError, match="appeared while this run wrote it"):
        with ProductSet([a, b]) as products:
            for path in (a, b):
                with atomic_path(path, products=products) as tmp:
                    tmp.write_text("new")
            b.write_text("another program")  # not an unmix run: claims do not stop it, the link does
    assert not a.exists() and b.read_text() == "another program"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["b.tif"]


def test_failed_overwrite_restores_the_old_set(tmp_path, monkeypatch):
    a, b = tmp_path / "a.nc", tmp_path / "b.tif"
    a.write_text("old a")
    b.write_text("old b")
    real_replace = os.replace

    def replace(src, dst):
        if Path(dst) == b:  # the second product cannot be put in place
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(dst))
        real_replace(src, dst)

    monkeypatch.setattr(claim_module.os, "replace", replace)
    with pytest.raises(ProductWriteError, match="disk is full"):
        with ProductSet([a, b], overwrite=True) as products:
            for path in (a, b):
                with products.writing(path) as tmp:
                    tmp.write_text("new")
    assert a.read_text() == "old a" and b.read_text() == "old b"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.nc", "b.tif"]


def test_file_system_errors_become_one_product_write_error(tmp_path):
    target = tmp_path / "p.nc"
    with pytest.raises(ProductWriteError, match=r"cannot write .*p\.nc: No space left on device; the disk is full") as info:
        with ProductSet([target]) as products, products.writing(target) as tmp:
            tmp.write_text("half")
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
    assert info.value.errno == errno.ENOSPC and isinstance(info.value, OSError)
    assert list(tmp_path.iterdir()) == []
    # not a write failure: raised unchanged, still nothing left
    with pytest.raises(ZeroDivisionError):
        with ProductSet([target]) as products, products.writing(target):
            1 / 0
    assert list(tmp_path.iterdir()) == []


def test_a_running_set_keeps_its_files_fresh(tmp_path, monkeypatch):
    monkeypatch.setattr(claim_module, "_HEARTBEAT_S", 0.02)
    target = tmp_path / "p.nc"
    long_ago = time.time() - STALE_AFTER_S - 60
    with ProductSet([target]) as products, products.writing(target) as tmp:
        tmp.write_text("partial")
        claim = tmp_path / ".p.nc.claim"
        for p in (claim, tmp):
            os.utime(p, (long_ago, long_ago))
        deadline = time.monotonic() + 20
        while time.monotonic() < deadline and min(p.stat().st_mtime for p in (claim, tmp)) < long_ago + 1:
            time.sleep(0.01)
        # touched again: a run on another host would not take these files for abandoned ones
        assert min(p.stat().st_mtime for p in (claim, tmp)) > long_ago + 1
        assert not claim_module.remove_stale(tmp_path)
