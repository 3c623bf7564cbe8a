"""A small host world for containment checks: canary files, a loopback listener and a helper process.

`World.harm(result)` lists everything a sandboxed program changed or learned that it must not have: canary
content, mode, owner, times (ctime moves on any inode change) and attribute flags (FS_IOC_GETFLAGS, the
ioctl behind lsattr), extended attributes, new files, a connection to the listener, the helper's limits,
state or signals; and, in what came back, the text of a secret file, of a world-readable file outside the
sandbox folder, or a listing of the world's folder.
"""

from __future__ import annotations

import array
import fcntl
import os
import signal
import socket
import subprocess
import sys
import shutil
import tempfile
import time
from pathlib import Path

SECRET_TEXT = "kelpwick-ledger-7731"
SETTLE_SECONDS = 0.05
PUBLIC_TEXT = "tide table: high water 06:40"
FS_IOC_GETFLAGS = 0x80086601  # _IOR('f', 1, long) on 64-bit Linux (linux/fs.h)
FS_IOC_SETFLAGS = 0x40086602  # _IOW('f', 2, long)

HELPER_CODE = """
import signal, sys, time
log = open(sys.argv[1], "a", buffering=1)
def note(number, frame):
    log.write(f"{number}\\n")
for s in signal.valid_signals():
    if s not in (signal.SIGKILL, signal.SIGSTOP):
        try:
            signal.signal(s, note)
        except (OSError, ValueError, RuntimeError):
            pass
print("ready", flush=True)
while True:
    time.sleep(60)
"""


def _flags(path: Path):
    fd = os.open(path, os.O_RDONLY)
    try:
        buf = array.array("l", [0])
        fcntl.ioctl(fd, FS_IOC_GETFLAGS, buf)
        return buf[0]
    except OSError as exc:
        return f"unsupported: {exc.errno}"
    finally:
        os.close(fd)


class World:
    def __init__(self) -> None:
        self.folder = Path(tempfile.mkdtemp(prefix="jigwright-world-"))
        self.canary = self.folder / "canary.txt"
        self.canary.write_text("berth 4: Kestrel\n")
        os.chmod(self.canary, 0o640)
        os.utime(self.canary, ns=(1_700_000_000_000_000_000, 1_700_000_000_000_000_000))
        self.secret = self.folder / "secret.txt"
        self.secret.write_text(SECRET_TEXT)
        os.chmod(self.secret, 0o600)
        self.public = self.folder / "public.txt"  # readable by every user, like /etc/hostname
        self.public.write_text(PUBLIC_TEXT)
        os.chmod(self.public, 0o644)
        os.chmod(self.folder, 0o755)
        self.target = self.folder / "pwned"
        self.listener = socket.socket()
        self.listener.bind(("127.0.0.1", 0))
        self.listener.listen(4)
        self.listener.setblocking(False)
        self.port = self.listener.getsockname()[1]
        self.signal_log = self.folder / "signals.log"
        self.helper = subprocess.Popen([sys.executable, "-c", HELPER_CODE, str(self.signal_log)],
                                       stdout=subprocess.PIPE, stdin=subprocess.DEVNULL)
        assert self.helper.stdout.readline().strip() == b"ready"
        self.baseline = self.snapshot()

    def places(self) -> dict[str, object]:
        return {"TARGET": self.target, "CANARY": self.canary, "SECRET": self.secret, "PUBLIC": self.public, "PORT": self.port,
                "HELPER": self.helper.pid}

    def _file(self, path: Path) -> dict:
        if not path.exists():
            return {"missing": True}
        st = os.stat(path)
        return {"content": path.read_bytes(), "mode": oct(st.st_mode), "owner": (st.st_uid, st.st_gid),
                "mtime": st.st_mtime_ns, "ctime": st.st_ctime_ns, "links": st.st_nlink, "flags": _flags(path),
                "xattrs": sorted(os.listxattr(path))}

    def snapshot(self) -> dict:
        pid = self.helper.pid
        alive = self.helper.poll() is None
        state = limits = ""
        if alive:
            code = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
            state = "stopped" if code in ("T", "t") else "not stopped"
            limits = Path(f"/proc/{pid}/limits").read_text()
        try:
            connection, _ = self.listener.accept()
            connection.close()
            connected = True
        except BlockingIOError:
            connected = False
        return {
            "canary": self._file(self.canary),
            "secret": self._file(self.secret),
            "folder": sorted(p.name for p in self.folder.iterdir()),
            "listener connected": connected,
            "helper alive": alive,
            "helper state": state,
            "helper limits": limits,
            "helper signals": self.signal_log.read_text() if self.signal_log.exists() else "",
        }

    def harm(self, result) -> list[str]:
        """What differs from the baseline, plus the secret text if it came back in the result."""
        time.sleep(SETTLE_SECONDS)  # signals are delivered, and handled, after kill() returns
        now = self.snapshot()
        found = [f"{key}: {self.baseline[key]!r} -> {now[key]!r}" for key in now if now[key] != self.baseline[key]]
        returned = repr(result.value) + result.stdout + result.message
        if SECRET_TEXT in returned:
            found.append("the secret file's text came back")
        if PUBLIC_TEXT in returned:
            found.append("the world-readable file's text came back")
        if self.signal_log.name in returned:  # no program names this file; only a listing shows it
            found.append("a listing of the world's folder came back")
        return found

    def close(self) -> None:
        if self.helper.poll() is None:
            os.kill(self.helper.pid, signal.SIGCONT)
            self.helper.kill()
        self.helper.wait(timeout=5)
        self.helper.stdout.close()
        self.listener.close()
        for path in (self.canary, self.secret):
            if path.exists() and isinstance(self.baseline["canary"]["flags"], int):
                fd = os.open(path, os.O_RDONLY)
                fcntl.ioctl(fd, FS_IOC_SETFLAGS, array.array("l", [self.baseline["canary"]["flags"]]))
                os.close(fd)
        shutil.rmtree(self.folder, ignore_errors=True)
