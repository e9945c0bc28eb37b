"""The allocator setting: a block loop's freed buffers are reused instead of faulted in again."""

from __future__ import annotations

import os
import resource
import subprocess
import sys

import pytest

from planner.allocator import reuse_freed_buffers

# One block's work as the passes do it: a second of 48 kHz stereo read as float32, made
# float64, scaled and transformed; 100 blocks. The page count each block's arrays need is
# the test's own arithmetic (4 arrays of 48000 x 2 values, 8 bytes, and the float32 read).
_LOOP = """
import resource, sys
import numpy as np
if sys.argv[1] == "tuned":
    from planner.allocator import reuse_freed_buffers
    assert reuse_freed_buffers()
before = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
for _ in range(100):
    x = np.ones((48000, 2), np.float32); y = x.astype(np.float64); z = y * 2.0; w = np.fft.rfft(y, axis=0)
    del x, y, z, w
print(resource.getrusage(resource.RUSAGE_SELF).ru_minflt - before)
"""
_BLOCK_PAGES = (48000 * 2 * (4 + 3 * 8)) // resource.getpagesize()


def _faults(mode: str) -> int:
    env = {k: v for k, v in os.environ.items() if not k.startswith(("MALLOC_", "GLIBC_TUNABLES"))}
    out = subprocess.run([sys.executable, "-c", _LOOP, mode], env=env, capture_output=True, text=True, check=True)
    return int(out.stdout)


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc's mallopt")
def test_freed_block_buffers_are_reused_not_faulted_in_again() -> None:
    # by default every block's arrays are fresh pages (most of the 100 blocks fault theirs in) ...
    assert _faults("default") > 50 * _BLOCK_PAGES
    # ... with the setting only the first few blocks do
    assert _faults("tuned") < 5 * _BLOCK_PAGES


def test_a_users_own_allocator_tuning_wins(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("MALLOC_MMAP_THRESHOLD_", "131072")
    assert reuse_freed_buffers() is False
