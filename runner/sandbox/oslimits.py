"""The operating-system layer for the per-call child: rlimits, privileges, file-system restriction and
an allow-list syscall filter (standard library only, plus libseccomp through pyseccomp when present).

The host compiles the filter with libseccomp (once per process); the worker prepares the rest once (the
Landlock ruleset, the built-in filter if libseccomp is missing); each child then only
applies it, in this order: no-new-privileges, privilege drop (as root), rlimits, Landlock, seccomp. After
`harden` returns, the child can compute, read and write the descriptors it already holds, read clocks and
exit; opening files, sockets, new processes or threads, ioctl, resource-limit and attribute changes,
ptrace and signals to other processes all fail with EPERM.
"""

import ctypes
import errno
import math
import os
import resource
import signal

# Syscalls pure computation needs once the child is set up. Names, so libseccomp maps them for the machine.
ALLOWED_SYSCALLS = (
    "read", "readv", "pread64", "write", "writev", "close", "lseek", "fstat",  # descriptors already held
    "brk", "mmap", "munmap", "mremap", "mprotect", "madvise",  # memory
    "rt_sigaction", "rt_sigprocmask", "rt_sigreturn", "sigaltstack", "restart_syscall",  # own signals
    "getitimer", "setitimer", "clock_gettime", "clock_getres", "gettimeofday", "time",  # clocks, own timer
    "nanosleep", "clock_nanosleep", "sched_yield", "futex", "getrandom", "getpid", "gettid",
    "exit", "exit_group",
)
# The same on x86_64, for the hand-assembled fallback when libseccomp is not available.
_X86_64 = {
    "read": 0, "write": 1, "close": 3, "fstat": 5, "lseek": 8, "mmap": 9, "mprotect": 10, "munmap": 11,
    "brk": 12, "rt_sigaction": 13, "rt_sigprocmask": 14, "rt_sigreturn": 15, "pread64": 17, "readv": 19,
    "writev": 20, "sched_yield": 24, "mremap": 25, "madvise": 28, "nanosleep": 35, "getitimer": 36,
    "setitimer": 38, "getpid": 39, "exit": 60, "gettimeofday": 96, "sigaltstack": 131, "gettid": 186,
    "time": 201, "futex": 202, "restart_syscall": 219, "clock_gettime": 228, "clock_getres": 229,
    "clock_nanosleep": 230, "exit_group": 231, "getrandom": 318,
}
_AUDIT_ARCH_X86_64 = 0xC000003E
_SECCOMP_RET_ALLOW, _SECCOMP_RET_KILL_PROCESS = 0x7FFF0000, 0x80000000
_SECCOMP_RET_ERRNO = 0x00050000

_PR_SET_PDEATHSIG, _PR_SET_DUMPABLE, _PR_SET_SECCOMP, _PR_CAPBSET_DROP = 1, 4, 22, 24
_PR_SET_NO_NEW_PRIVS, _PR_CAP_AMBIENT, _PR_CAP_AMBIENT_CLEAR_ALL = 38, 47, 4
_SYS_LANDLOCK_CREATE_RULESET, _SYS_LANDLOCK_RESTRICT_SELF = 444, 446

_state: dict = {}


class SetupError(Exception):
    """A layer could not be applied in the child; the call must not run."""


def libc():
    if "libc" not in _state:
        lib = ctypes.CDLL(None, use_errno=True)
        lib.prctl.argtypes = [ctypes.c_int, ctypes.c_ulong, ctypes.c_ulong, ctypes.c_ulong, ctypes.c_ulong]
        lib.syscall.restype = ctypes.c_long
        _state["libc"] = lib
    return _state["libc"]


def _prctl(option: int, arg: int = 0, arg3: int = 0) -> None:
    if libc().prctl(option, arg, arg3, 0, 0) != 0:
        err = ctypes.get_errno()
        raise SetupError(f"prctl({option}) failed: {os.strerror(err)}")


# --- rlimits ---------------------------------------------------------------------------------------------

def apply_rlimits(limits: dict) -> None:
    """CPU (hard backstop), address space, no file writes, few descriptors, no processes, no core dumps."""
    cpu = math.ceil(limits["cpu_seconds"]) + 1
    memory = limits["memory_mb"] * 1024 * 1024
    for which, value in (
        (resource.RLIMIT_CPU, (cpu, cpu + 1)),
        (resource.RLIMIT_AS, (memory, memory)),
        (resource.RLIMIT_FSIZE, (0, 0)),
        (resource.RLIMIT_NOFILE, (limits["open_files"], limits["open_files"])),
        (resource.RLIMIT_NPROC, (0, 0)),
        (resource.RLIMIT_CORE, (0, 0)),
    ):
        resource.setrlimit(which, value)


def set_parent_death_signal() -> None:
    """Die with the parent; reset by a credential change, so set again after the privilege drop."""
    try:
        libc().prctl(_PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0)
    except (OSError, AttributeError):
        pass


# --- network namespace (once per worker) ---------------------------------------------------------------

def unshare_network() -> tuple:
    """Move the worker into a fresh network namespace (no interfaces up, so no network at all).

    Root can do that directly; other users need a new user namespace around it, where the kernel allows one.
    """
    clone_newnet, clone_newuser = 0x40000000, 0x10000000
    attempts = [clone_newnet] if os.geteuid() == 0 else [clone_newnet, clone_newnet | clone_newuser]
    err = 0
    try:
        for flags in attempts:
            if libc().unshare(flags) == 0:
                how = " (inside a new user namespace)" if flags & clone_newuser else ""
                return True, f"each worker runs in a fresh network namespace with no interfaces{how}"
            err = ctypes.get_errno()
    except (OSError, AttributeError) as exc:
        return False, f"unshare(CLONE_NEWNET) is unavailable: {exc}"
    return False, f"unshare(CLONE_NEWNET) failed: {os.strerror(err)} (needs root or unprivileged user namespaces)"


# --- privileges ----------------------------------------------------------------------------------------

# No account has this id, so a child running under it owns no file and shares its uid with no process.
UNPRIVILEGED_ID = 2_100_000_000
NOBODY_ID = 65534  # the conventional unprivileged account, when the id above is not mapped (containers)


def _last_capability() -> int:
    try:
        with open("/proc/sys/kernel/cap_last_cap", "rb") as fh:
            return int(fh.read())
    except (OSError, ValueError):
        return 40


def _mapped(which: str, ident: int) -> bool:
    """Whether `ident` exists in this user namespace (/proc/self/uid_map or gid_map: inside, outside, count)."""
    try:
        with open(f"/proc/self/{which}_map", encoding="ascii") as fh:
            rows = [tuple(int(x) for x in line.split()) for line in fh if line.strip()]
    except (OSError, ValueError):
        return True
    return any(inside <= ident < inside + count for inside, _, count in rows)


def prepare_privileges() -> tuple:
    """Decide, once in the worker, whether and to which id children drop; returns (drop, mode, detail)."""
    if os.geteuid() != 0:
        return False, "not root", (f"runs as uid {os.geteuid()}: nothing to drop, but the child keeps that user's "
                                   "uid, so only the syscall filter and Landlock keep it from that user's files")
    ident = next((i for i in (UNPRIVILEGED_ID, NOBODY_ID) if _mapped("uid", i) and _mapped("gid", i)), None)
    if ident is None:
        return False, "none", "running as root, but no unprivileged uid/gid is mapped in this user namespace"
    _state.update(last_cap=_last_capability(), drop_to=ident)
    who = "no account" if ident == UNPRIVILEGED_ID else "nobody"
    return True, "uid/gid dropped", (f"as root, each child switches to uid/gid {ident} ({who}) "
                                     "with no supplementary groups and no capabilities")


def drop_privileges() -> None:
    """As root: empty the capability bounding and ambient sets, then switch to the unprivileged ids."""
    ident = _state["drop_to"]
    for cap in range(_state["last_cap"] + 1):
        libc().prctl(_PR_CAPBSET_DROP, cap, 0, 0, 0)
    libc().prctl(_PR_CAP_AMBIENT, _PR_CAP_AMBIENT_CLEAR_ALL, 0, 0, 0)
    os.setgroups([])
    os.setresgid(ident, ident, ident)
    os.setresuid(ident, ident, ident)  # clears permitted and effective capabilities
    if os.getresuid() != (ident,) * 3 or os.getresgid() != (ident,) * 3:
        raise SetupError("the privilege drop did not take")


def dropped_to() -> int | None:
    return _state.get("drop_to")


# --- Landlock (file system, TCP and signals) --------------------------------------------------------------

class _RulesetAttr(ctypes.Structure):
    _fields_ = [("handled_access_fs", ctypes.c_uint64), ("handled_access_net", ctypes.c_uint64),
                ("scoped", ctypes.c_uint64)]


def prepare_landlock() -> tuple:
    """Create, once in the worker, a Landlock ruleset that handles every access right and grants none.

    Returns (active, mode, detail); children apply it with `restrict_files`.
    """
    lib = libc()
    abi = lib.syscall(_SYS_LANDLOCK_CREATE_RULESET, None, ctypes.c_size_t(0), ctypes.c_uint32(1))
    if abi < 1:
        err = ctypes.get_errno()
        why = "not enabled in this kernel" if err in (errno.EOPNOTSUPP, errno.ENOSYS) else os.strerror(err)
        return False, "none", f"Landlock is unavailable ({why}); file access is stopped by the syscall filter alone"
    fs = (1 << 13) - 1  # execute, read, write, make and remove every kind of file (ABI 1)
    if abi >= 2:
        fs |= 1 << 13  # refer (links and renames across folders)
    if abi >= 3:
        fs |= 1 << 14  # truncate
    if abi >= 5:
        fs |= 1 << 15  # ioctl on devices
    net = 0b11 if abi >= 4 else 0  # bind and connect TCP
    scoped = 0b11 if abi >= 6 else 0  # abstract UNIX sockets and signals outside the domain
    attr = _RulesetAttr(fs, net, scoped)
    size = 24 if abi >= 6 else 16 if abi >= 4 else 8
    fd = lib.syscall(_SYS_LANDLOCK_CREATE_RULESET, ctypes.byref(attr), ctypes.c_size_t(size), ctypes.c_uint32(0))
    if fd < 0:
        return False, "none", f"Landlock ruleset could not be created: {os.strerror(ctypes.get_errno())}"
    _state["landlock_fd"] = fd
    extra = [what for what, on in (("TCP bind/connect", net), ("signals and abstract sockets outside", scoped)) if on]
    return True, f"Landlock ABI {abi}", ("no file or folder may be opened, created or changed"
                                         + (f"; also denied: {', '.join(extra)}" if extra else ""))


def restrict_files() -> None:
    """Apply the worker's Landlock ruleset to this process (needs no-new-privileges set first)."""
    fd = _state.get("landlock_fd")
    if fd is None:
        return
    if libc().syscall(_SYS_LANDLOCK_RESTRICT_SELF, ctypes.c_int(fd), ctypes.c_uint32(0)) != 0:
        raise SetupError(f"landlock_restrict_self failed: {os.strerror(ctypes.get_errno())}")
    os.close(fd)
    _state.pop("landlock_fd")


# --- seccomp allow-list ----------------------------------------------------------------------------------

class _SockFilter(ctypes.Structure):
    _fields_ = [("code", ctypes.c_ushort), ("jt", ctypes.c_ubyte), ("jf", ctypes.c_ubyte), ("k", ctypes.c_uint)]


class _SockFprog(ctypes.Structure):
    _fields_ = [("len", ctypes.c_ushort), ("filter", ctypes.POINTER(_SockFilter))]


def compile_with_libseccomp() -> tuple:
    """The allow-list compiled by libseccomp (through the pyseccomp binding) as raw classic BPF, and a note.

    Called on the host, once per process: the worker runs without site-packages and gets the bytes.
    Returns (None, why) when the binding or the library is missing.
    """
    try:
        import pyseccomp as binding
    except ImportError:
        return None, "the pyseccomp binding is not installed"
    except Exception as exc:  # noqa: BLE001 - e.g. RuntimeError when libseccomp itself is missing
        return None, f"libseccomp unusable ({type(exc).__name__}: {str(exc)[:120]})"
    try:
        program = binding.SyscallFilter(defaction=binding.ERRNO(errno.EPERM))
        for name in ALLOWED_SYSCALLS:
            try:
                program.add_rule(binding.ALLOW, name)
            except (ValueError, OSError):  # not a syscall on this machine (e.g. `time` on arm64)
                continue
        out = os.memfd_create("jigwright-seccomp")
        try:
            program.export_bpf(_Descriptor(out))
            return os.pread(out, os.lseek(out, 0, os.SEEK_END), 0), "compiled by libseccomp"
        finally:
            os.close(out)
    except Exception as exc:  # noqa: BLE001 - any failure of the binding falls back to the built-in program
        return None, f"libseccomp failed ({type(exc).__name__}: {str(exc)[:120]})"


class _Descriptor:
    def __init__(self, fd: int) -> None:
        self.fd = fd

    def fileno(self) -> int:
        return self.fd


def _hand_built() -> bytes:
    """The same allow-list for x86_64 assembled here: wrong architecture kills, unknown syscalls get EPERM."""
    ld, jeq, jge, ret = 0x20, 0x15, 0x35, 0x06
    allowed = sorted(set(_X86_64[name] for name in ALLOWED_SYSCALLS))
    prog = [(ld, 0, 0, 4), (jeq, 1, 0, _AUDIT_ARCH_X86_64), (ret, 0, 0, _SECCOMP_RET_KILL_PROCESS),
            (ld, 0, 0, 0), (jge, "deny", 0, 0x40000000)]
    prog += [(jeq, "allow", 0, nr) for nr in allowed]
    prog += [(ret, 0, 0, _SECCOMP_RET_ERRNO | errno.EPERM), (ret, 0, 0, _SECCOMP_RET_ALLOW)]
    targets = {"deny": len(prog) - 2, "allow": len(prog) - 1}
    out = bytearray()
    for i, (code, jt, jf, k) in enumerate(prog):
        jt = targets[jt] - i - 1 if isinstance(jt, str) else jt
        out += bytes(_SockFilter(code, jt, jf, k))
    return bytes(out)


def prepare_syscall_filter(program, note: str) -> tuple:
    """Load the allow-list once in the worker; returns (active, mode, detail). Children install it.

    `program` is the filter libseccomp compiled on the host, or None; then the built-in x86_64 program is used.
    """
    source = note
    if program is None:
        if os.uname().machine != "x86_64":
            return False, "none", f"{note}; no built-in syscall table for {os.uname().machine}: no syscall filter"
        program, source = _hand_built(), f"{note}; hand-assembled BPF (x86_64)"
    buffer = ctypes.create_string_buffer(program, len(program))
    fprog = _SockFprog(len(program) // ctypes.sizeof(_SockFilter), ctypes.cast(buffer, ctypes.POINTER(_SockFilter)))
    _state["filter"] = (fprog, buffer)
    return True, "allow-list", (f"{source}: only memory, clocks, own signals and timers, reads and writes on "
                                "descriptors already open, and exit are allowed; every other syscall fails with EPERM")


def install_syscall_filter() -> None:
    fprog = _state["filter"][0]
    if libc().prctl(_PR_SET_SECCOMP, 2, ctypes.addressof(fprog), 0, 0) != 0:  # SECCOMP_MODE_FILTER
        raise SetupError(f"seccomp filter failed: {os.strerror(ctypes.get_errno())}")


# --- all together, in the child --------------------------------------------------------------------------

def harden(limits: dict, layers: dict, skip: frozenset = frozenset()) -> None:
    """Apply every prepared layer to this (child) process. `skip` names layers a test switched off."""
    _prctl(_PR_SET_NO_NEW_PRIVS, 1)
    if layers["privileges"][0] and "privileges" not in skip:
        drop_privileges()
    set_parent_death_signal()
    _prctl(_PR_SET_DUMPABLE, 0)  # no core dumps, no ptrace from peers; a uid change resets it
    apply_rlimits(limits)
    if layers["files"][0] and "files" not in skip:
        restrict_files()
    elif "landlock_fd" in _state:
        os.close(_state.pop("landlock_fd"))
    if layers["syscall_filter"][0] and "syscall_filter" not in skip:
        install_syscall_filter()
