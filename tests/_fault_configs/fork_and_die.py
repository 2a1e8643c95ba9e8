"""Take the run lock of OUT, fork a child that outlives us, print its pid, die by SIGKILL.

Used by tests/test_faults.py: the child must not keep the run lock alive (a forked pool
worker orphaned by a killed driver used to).
"""

import os
import signal
import sys
import time

from harness.store import Store

store = Store(sys.argv[1])
child = os.fork()
if child == 0:
    null = os.open(os.devnull, os.O_RDWR)
    for fd in (0, 1, 2):  # let the test's pipes close when the parent dies
        os.dup2(null, fd)
    time.sleep(120)
    os._exit(0)
print(child, flush=True)
os.kill(os.getpid(), signal.SIGKILL)
