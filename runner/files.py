"""Input files must be regular files: what else a path can name, told from its mode.

The spec and data readers call ``os.stat`` before they open anything, so a folder, a
device (``/dev/zero`` never ends) or a FIFO (opening one waits for a writer) is refused
with a message instead of hanging or filling memory.
"""

from __future__ import annotations

import stat

_KINDS = (
    (stat.S_ISDIR, "a folder"),
    (stat.S_ISCHR, "a character device"),
    (stat.S_ISBLK, "a block device"),
    (stat.S_ISFIFO, "a FIFO (named pipe)"),
    (stat.S_ISSOCK, "a socket"),
)


def special_file_kind(mode: int) -> str | None:
    """None for a regular file, else what the path is ("a folder", "a character
    device", "a FIFO (named pipe)", ...), from ``os.stat(path).st_mode``."""
    if stat.S_ISREG(mode):
        return None
    for test, kind in _KINDS:
        if test(mode):
            return kind
    return "not a regular file"
