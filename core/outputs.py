"""Files a command writes, whole or not at all.

Each output is kept under a temporary name in its target folder and moved into place only
when every output of the command could be written.  Devices, pipes and links
(``/dev/null``, ``/dev/stdout``, a FIFO) are written directly and never replaced by a
rename.  Used by the CLI's table and plot writers (:mod:`report`) and by ``tidy``.
"""
from __future__ import annotations

import os
import tempfile

from .errors import SpecError

__all__ = ["Outputs", "write_text"]


class Outputs:
    """The files one command writes, kept under temporary names in their target folders
    and moved into place together by :meth:`commit`; leaving the ``with`` block without a
    commit removes them, so a failure leaves no file and no half of a pair (table and plot)
    behind.  ``reserve`` creates the temporary file at once: an unwritable folder is found
    before any work is done."""

    def __init__(self):
        self._items = []

    def reserve(self, path, option):
        folder = os.path.dirname(os.path.abspath(path))
        if not os.path.isdir(folder):
            raise SpecError(f"{option} {path!r}: folder {folder!r} does not exist")
        if os.path.isdir(path):
            raise SpecError(f"{option} {path!r} is a folder")
        if os.path.islink(path) or (os.path.exists(path) and not os.path.isfile(path)):
            # a device, a pipe or a link (/dev/null, /dev/stdout, a FIFO): written directly,
            # never replaced by a rename (that would swap the device or link for a file)
            if not os.access(path, os.W_OK):
                raise SpecError(f"{option} {path!r}: cannot write there (no permission)")
            self._items.append((None, path, option))
            return path
        try:
            fd, tmp = tempfile.mkstemp(prefix=f".{os.path.basename(path)}.", suffix=".part", dir=folder)
        except OSError as exc:
            raise SpecError(f"{option} {path!r}: cannot write in folder {folder!r}: "
                            f"{exc.strerror or exc}") from None
        os.close(fd)
        mask = os.umask(0)
        os.umask(mask)
        try:
            os.chmod(tmp, 0o666 & ~mask)
        except OSError:
            pass
        self._items.append((tmp, path, option))
        return tmp

    def commit(self):
        for tmp, path, option in self._items:
            if tmp is None:
                continue
            try:
                os.replace(tmp, path)
            except OSError as exc:
                raise SpecError(f"{option} {path!r}: cannot write: {exc.strerror or exc}") from None
        self._items = []

    def discard(self):
        for tmp, _, _ in self._items:
            if tmp is None:
                continue
            try:
                os.unlink(tmp)
            except OSError:
                pass
        self._items = []

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.discard()
        return False


def write_text(path, text, option="--out"):
    """Write ``text`` (UTF-8) to ``path`` whole or not at all; a :class:`SpecError` naming
    ``option`` when it cannot be written."""
    with Outputs() as outs:
        target = outs.reserve(path, option)
        try:
            with open(target, "w", encoding="utf-8", newline="") as fh:
                fh.write(text)
        except OSError as exc:
            raise SpecError(f"{option} {path!r}: cannot write: {exc.strerror or exc}") from None
        outs.commit()
