"""Run the fringecal command line on a disk that fills up: ``python tests/diskfull.py BYTES fringecal-args...``.

Every ``os.write`` (how fringecal writes frames and journal lines) counts against BYTES; the write that crosses it
is cut short and the next one fails with ENOSPC, as on a full disk. Only tests use this.
"""

import errno
import os
import sys

budget = int(sys.argv[1])
real_write = os.write


def write(fd, data):
    global budget
    if budget <= 0:
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
    data = bytes(data)[:budget]
    budget -= len(data)
    return real_write(fd, data)


os.write = write
sys.argv = ["fringecal", *sys.argv[2:]]
from rig.cli import main  # noqa: E402  (after the patch)

sys.exit(main())
