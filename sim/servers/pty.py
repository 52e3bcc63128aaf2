"""Pseudo-terminals published under a stable path (a symlink in the run directory)."""

from __future__ import annotations

import contextlib
import os
import tty
from dataclasses import dataclass
from pathlib import Path

__all__ = ["PtyPair", "open_pty"]


@dataclass
class PtyPair:
    """A raw pty: we keep the master; peers open ``path`` (the slave). We hold the slave open
    too, so the master never sees EIO while no peer has the line open."""

    master: int
    slave: int
    name: str  # /dev/pts/N
    link: Path | None = None

    def close(self) -> None:
        if self.link is not None:
            with contextlib.suppress(OSError):
                if self.link.is_symlink() and os.readlink(self.link) == self.name:
                    self.link.unlink()
        for fd in (self.master, self.slave):
            with contextlib.suppress(OSError):
                os.close(fd)


def open_pty(link: Path | None = None) -> PtyPair:
    """Open a raw, non-blocking pty and (optionally) point ``link`` at its slave."""
    master, slave = os.openpty()
    tty.setraw(master)
    tty.setraw(slave)
    os.set_blocking(master, False)
    name = os.ttyname(slave)
    pair = PtyPair(master, slave, name)
    if link is not None:
        link.parent.mkdir(parents=True, exist_ok=True)
        tmp = link.with_name(link.name + ".new")
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
        os.symlink(name, tmp)
        os.replace(tmp, link)  # atomic: a peer never sees a missing or half-made link
        pair.link = link
    return pair
