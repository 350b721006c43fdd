"""chainrun.heap: freed block-sized buffers are reused from the heap instead of faulting in fresh pages.

The check counts the process's minor page faults (getrusage ru_minflt, POSIX) over a loop that
makes and frees four 1 MB arrays, as a render does with its block-sized arrays; the count is a
property of the allocator, not a timing.
"""
from __future__ import annotations

import json
import subprocess
import sys

import pytest

from support import REPO

LOOP = r"""
import json, resource, sys
import numpy as np

def faults(rounds=40):
    f0 = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
    for _ in range(rounds):
        a, b, c, d = (np.ones(131072) for _ in range(4))      # 1 MB each, freed together
        del a, b, c, d
    return resource.getrusage(resource.RUSAGE_SELF).ru_minflt - f0

faults(3)
before = faults()
from chainrun.heap import keep_freed_buffers
took = keep_freed_buffers()
again = keep_freed_buffers()                                  # once per process: the same answer
faults(3)
print(json.dumps({"before": before, "after": faults(), "took": took, "again": again}))
"""


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc's mallopt: Linux only")
def test_freed_block_buffers_come_back_from_the_heap_instead_of_fresh_pages():
    out = subprocess.run([sys.executable, "-c", LOOP], capture_output=True, text=True, check=True,
                         cwd=REPO, env={"PYTHONPATH": str(REPO), "PATH": "/usr/bin:/bin"})
    got = json.loads(out.stdout)
    if not got["took"]:
        pytest.skip("malloc is not glibc's here (mallopt missing or refused)")
    assert got["again"] is True
    if got["before"] < 1000:
        pytest.skip(f"this malloc reuses the buffers by itself ({got['before']} faults in 40 rounds)")
    # each round faulted in its 4 MB again before (about 1000 pages of 4 KB); after, next to none
    assert got["after"] * 100 <= got["before"], got
