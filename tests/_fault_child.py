"""Run the ``unmix`` command line in a child process with injected faults (used by tests/test_io_faults.py).

Faults are set by environment variables, so the child runs the real entry point
(:func:`unmix.cli.main.main`) in a real process that can be killed or limited:

``UNMIX_FAULT_FSIZE``
    File size limit [bytes] (``RLIMIT_FSIZE``) from the start; SIGXFSZ is ignored, so a write
    beyond the limit fails with EFBIG, as a full disk fails with ENOSPC.
``UNMIX_FAULT_FSIZE_AT_COG``
    The same limit, set only when the first Cloud-Optimized GeoTIFF is about to be written (the
    NetCDF product of the same run is complete by then).
``UNMIX_FAULT_PAUSE``
    After the first compressed NetCDF chunk is stored, print ``paused <temporary file>`` on stdout
    and wait until the file named by this variable exists (or the temporary file is gone, i.e. the
    run was cleaned up), at most 60 s. The parent kills or releases the child meanwhile.
"""

from __future__ import annotations

import os
import resource
import signal
import sys
import time


def _limit(nbytes: int) -> None:
    resource.setrlimit(resource.RLIMIT_FSIZE, (nbytes, resource.getrlimit(resource.RLIMIT_FSIZE)[1]))


def _install_faults() -> None:
    signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    if os.environ.get("UNMIX_FAULT_FSIZE"):
        _limit(int(os.environ["UNMIX_FAULT_FSIZE"]))
    if os.environ.get("UNMIX_FAULT_FSIZE_AT_COG"):
        import unmix.io.products as products

        original_cog = products.write_cog

        def write_cog(*args, **kwargs):
            _limit(int(os.environ["UNMIX_FAULT_FSIZE_AT_COG"]))
            return original_cog(*args, **kwargs)

        products.write_cog = write_cog
    if os.environ.get("UNMIX_FAULT_PAUSE"):
        from unmix.io import _chunked_writer

        original_set = _chunked_writer.ChunkTarget.__setitem__
        go = os.environ["UNMIX_FAULT_PAUSE"]
        paused = []

        def setitem(self, region, block):
            original_set(self, region, block)
            if not paused:
                paused.append(self.path)
                print(f"paused {self.path}", flush=True)
                deadline = time.monotonic() + 60
                while not os.path.exists(go) and os.path.exists(self.path) and time.monotonic() < deadline:
                    time.sleep(0.05)

        _chunked_writer.ChunkTarget.__setitem__ = setitem


if __name__ == "__main__":
    _install_faults()
    from unmix.cli.main import main

    sys.exit(main(sys.argv[1:]))
