"""The server's processes, seen from /proc (Linux), for ``attack.py``: the gunicorn master
behind a loopback port, its workers' peak resident set and CPU time."""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path
from urllib.parse import urlsplit

import run_load


def loopback_port(url: str) -> int:
    """The port of an http://127.0.0.1:PORT URL; anything else is refused."""
    parts = urlsplit(url)
    if parts.scheme != "http" or parts.hostname != "127.0.0.1" or parts.port is None:
        raise SystemExit(f"refusing {url!r}: only http://127.0.0.1:PORT is attacked")
    return parts.port


def listening_master(port: int) -> int | None:
    """The gunicorn master listening on ``port``: of this user's processes holding the
    listening socket (/proc/net/tcp inode), the one whose parent does not hold it."""
    inodes = set()
    for line in Path("/proc/net/tcp").read_text().splitlines()[1:]:
        cols = line.split()
        if cols[3] == "0A" and int(cols[1].split(":")[1], 16) == port:
            inodes.add(f"socket:[{cols[9]}]")
    holders: dict[int, int] = {}
    for proc in Path("/proc").iterdir():
        if not proc.name.isdigit() or proc.stat().st_uid != os.getuid():
            continue
        try:
            if any(os.readlink(fd) in inodes for fd in (proc / "fd").iterdir()):
                stat = (proc / "stat").read_text()
                holders[int(proc.name)] = int(stat.rsplit(")", 1)[1].split()[1])
        except OSError:
            continue
    masters = [p for p, parent in holders.items() if parent not in holders]
    return masters[0] if len(masters) == 1 else None


def reset_peaks(pids: Sequence[int]) -> None:
    """Reset each process's VmHWM to its current resident set (/proc/<pid>/clear_refs, 5)."""
    for pid in pids:
        try:
            Path(f"/proc/{pid}/clear_refs").write_text("5")
        except OSError:
            pass


def peak_bytes(pids: Sequence[int]) -> int:
    out = 0
    for pid in pids:
        try:
            out = max(out, run_load.vm_hwm_kib(pid) * 1024)
        except (OSError, RuntimeError):
            pass
    return out


def cpu_seconds(pids: Sequence[int]) -> float:
    total = 0
    for pid in pids:
        try:
            cols = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
            total += int(cols[11]) + int(cols[12])
        except OSError:
            pass
    return total / os.sysconf("SC_CLK_TCK")
