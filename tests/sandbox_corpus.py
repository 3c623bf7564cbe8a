"""The adversarial corpus: tool programs that try to escape, hang, exhaust or mislead the sandbox.

Shared by tests/test_sandbox.py (the full sandbox: each program must end with the expected error kind) and
tests/test_sandbox_containment.py (the screen, the restricted builtins and the filtered module copies
switched off: each program must be contained by the operating-system layer alone). Placeholders filled in
by `fill`: TARGET (a path that must never come to exist), CANARY (an existing file that must keep its
content, mode, times and attribute flags), SECRET (a file whose text must never come back), PUBLIC (a file every
user may read), PORT (a loopback port the test listens on), HELPER (the pid of a process the test started).
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Case:
    name: str
    code: str
    kind: str
    contains: str = ""
    line: int | None = None
    args: dict | None = None
    # Would, with every per-call OS layer off and running as root, reach beyond its own process in ways a
    # single layer's test must not risk on a shared machine (new processes, signals to every process).
    risky_alone: bool = False


def fill(code: str, places: dict[str, object]) -> str:
    for key, value in places.items():
        code = code.replace(key, str(value))
    return code


NORMAL = "def solve(x):\n    return x * 2\n"

CORPUS = [
    Case("infinite_loop", "def solve():\n    while True:\n        pass\n", "timeout", "CPU time limit of 1 s"),
    Case("uncatchable_loop", "def solve():\n    while True:\n        try:\n            while True:\n                pass\n"
         "        except BaseException:\n            pass\n", "timeout"),
    Case("module_level_loop", "while True:\n    pass\ndef solve():\n    return 1\n", "timeout", "CPU time limit"),
    Case("big_int_power", "def solve():\n    return 10 ** 10 ** 8\n", "timeout"),
    Case("deep_recursion", "def solve():\n    def f(n):\n        return f(n + 1)\n    return f(0)\n", "exception",
         "RecursionError: maximum recursion depth exceeded", line=3),
    Case("ten_gib_allocation", "def solve():\n    return bytearray(10 * 1024 ** 3)\n", "memory",
         "MemoryError: memory limit of 128 MB exceeded at line 2", line=2),
    Case("memory_growth", "def solve():\n    x = []\n    while True:\n        x.append(bytearray(10 ** 7))\n", "memory", line=4),
    Case("list_growth_caught", "def solve():\n    x = []\n    try:\n        while True:\n            x.append(' ' * 10 ** 6)\n"
         "    except MemoryError:\n        x = None\n    return 1 / 0\n", "exception", "ZeroDivisionError", line=8),
    Case("fork_bomb", "import os\ndef solve():\n    while True:\n        os.fork()\n", "screen",
         "import of 'os' is not allowed (rule: import-allow-list) at line 1", line=1),
    Case("subprocess", "import subprocess\ndef solve():\n    subprocess.run(['touch', 'TARGET'])\n", "screen", "import-allow-list"),
    Case("os_system", "from os import system\ndef solve():\n    return system('touch TARGET')\n", "screen", "'os'"),
    Case("file_write", "def solve():\n    with open('TARGET', 'w') as fh:\n        fh.write('x')\n", "screen",
         "name 'open' is not allowed (rule: denied-name) at line 2", line=2),
    Case("read_passwd", "def solve():\n    return open('/etc/passwd').read()\n", "screen", "denied-name"),
    Case("socket_connect", "import socket\ndef solve():\n    socket.create_connection(('127.0.0.1', 9))\n", "screen", "'socket'"),
    Case("ctypes", "import ctypes\ndef solve():\n    return ctypes.string_at(0)\n", "screen", "'ctypes'"),
    Case("importlib", "import importlib\ndef solve():\n    return importlib.import_module('os').getcwd()\n", "screen", "'importlib'"),
    Case("dunder_import", "def solve():\n    return __import__('os').system('touch TARGET')\n", "screen", "'__import__'"),
    Case("subclasses_walk", "def solve():\n    return [c for c in ().__class__.__base__.__subclasses__()]\n", "screen",
         "dunder-attribute"),
    Case("globals_walk", "def solve():\n    return solve.__globals__['__builtins__']\n", "screen", "'__globals__'"),
    Case("builtins_trick", "def solve():\n    return __builtins__['open']('TARGET', 'w')\n", "screen", "'__builtins__'"),
    Case("getattr_built_dunder", "def solve():\n    d = '_' * 2\n    return getattr((), d + 'class' + d)\n", "screen",
         "name 'getattr' is not allowed", line=3),
    Case("exec_string", "def solve():\n    exec('import os; os.system(\"touch TARGET\")')\n", "screen", "'exec'"),
    Case("eval_string", "def solve():\n    return eval('1 + 1')\n", "screen", "'eval'"),
    Case("compile_string", "def solve():\n    return compile('1', 'x', 'eval')\n", "screen", "'compile'"),
    Case("huge_print", "def solve():\n    while True:\n        print('x' * 1000)\n", "output",
         "printed more than 65536 bytes", line=3),
    Case("print_overflow_swallowed", "def solve():\n    for _ in range(1000):\n        try:\n            print('y' * 1000)\n"
         "        except BaseException:\n            pass\n    return 1\n", "output", line=4),
    Case("return_set", "def solve():\n    return {1, 2}\n", "bad_return", "returned a set"),
    Case("return_object", "class Box:\n    pass\ndef solve():\n    return Box()\n", "bad_return", "returned a Box object"),
    Case("return_nan", "def solve():\n    return float('nan')\n", "bad_return", "returned NaN"),
    Case("return_nested_infinity", "def solve():\n    return {'a': [1, float('inf')]}\n", "bad_return",
         "returned Infinity at ['a'][1]"),
    Case("return_too_large", "def solve():\n    return 'x' * (2 * 1024 * 1024)\n", "bad_return", "bytes of JSON"),
    Case("return_huge_int", "def solve():\n    return 10 ** 5000\n", "bad_return", "JSON"),
    Case("return_int_keys", "def solve():\n    return {1: 'a'}\n", "bad_return", "non-string key 1"),
    Case("return_generator", "def solve():\n    return (i for i in range(3))\n", "bad_return", "generator"),
    Case("return_cycle", "def solve():\n    x = []\n    x.append(x)\n    return x\n", "bad_return", "nested deeper"),
    Case("exception_line", "def solve(items):\n    total = 0\n    for x in items:\n        total += 10 / x\n    return total\n",
         "exception", "ZeroDivisionError: division by zero at line 4", line=4, args={"items": [1, 0]}),
    Case("exception_in_library", "import json\ndef solve():\n    return json.loads('{bad')\n", "exception",
         "JSONDecodeError", line=3),
    Case("system_exit", "def solve():\n    raise SystemExit(3)\n", "exception", "SystemExit: 3 at line 2", line=2),
    Case("wrong_arguments", NORMAL, "exception", "unexpected keyword argument 'y'", args={"y": 1}),
    Case("signal_handler", "import signal\ndef solve():\n    signal.signal(signal.SIGPROF, signal.SIG_IGN)\n", "screen", "'signal'"),
    Case("threads_outlive_call", "import threading\ndef solve():\n    threading.Thread(target=lambda: None).start()\n",
         "screen", "'threading'"),
    Case("syntax_error", "def solve():\n    x = (1,\n    return x\n", "screen", "SyntaxError: '(' was never closed", line=2),
    Case("sys_modules", "import sys\ndef solve():\n    return sys.modules['os'].system('touch TARGET')\n", "screen", "'sys'"),
    Case("module_attribute_leak", "import typing\ndef solve():\n    return typing.sys.modules['os'].system('touch TARGET')\n",
         "screen", "attribute 'sys' is not allowed"),
    Case("type_three_args", "def solve():\n    return type('X', (object,), {})\n", "screen", "type-three-args"),
    Case("type_subclasses", "def solve():\n    return type(0).mro()[-1].__subclasses__()\n", "screen", "'__subclasses__'"),
    Case("lambda_default_arg", "solve = lambda f=open: f('TARGET', 'w')\n", "screen", "'open'"),
    Case("lambda_globals", "solve = lambda g=(lambda: 0).__globals__: sorted(g)\n", "screen", "'__globals__'"),
    Case("generator_frame", "def solve():\n    g = (i for i in [1])\n    return g.gi_frame.f_globals\n", "screen", "'gi_frame'"),
    Case("format_attribute", "def solve():\n    return '{0.__class__}'.format(1)\n", "screen", "format"),
    Case("format_built_string", "def solve():\n    d = '_' * 2\n    return ('{0.' + d + 'class' + d + '}').format(1)\n",
         "screen", "format-string"),
    Case("str_format_indirect", "def solve(f):\n    return str.format(f, 1)\n", "screen", "format-string"),
    Case("match_class_dunder", "def solve():\n    match 1:\n        case object(__class__=c):\n            return 1\n",
         "screen", "'__class__'"),
    Case("attrgetter", "from operator import attrgetter\ndef solve():\n    return attrgetter('real')(1)\n", "screen", "'attrgetter'"),
    Case("get_type_hints", "import typing\ndef solve():\n    return typing.get_type_hints(solve)\n", "screen", "get_type_hints"),
    Case("private_attribute", "import collections\ndef solve():\n    return collections._sys\n", "screen", "private-attribute"),
    Case("breakpoint", "def solve():\n    breakpoint()\n", "screen", "'breakpoint'"),
    Case("relative_import", "from . import x\ndef solve():\n    return 1\n", "screen", "relative imports"),
    Case("missing_entry", "def other():\n    return 1\n", "screen", "no top-level function 'solve'"),
]

# Programs of kinds the first corpus did not hold: attribute readers built from allowed helpers, strings the
# standard library evaluates, frame walks, harm through the real modules once past the Python layers,
# forging the result channel, nested format specs, lone surrogates, reads outside the sandbox folder.
_REAL_OS = ("json.dumps.__globals__['__builtins__']['__import__']('os')")
NEW_CORPUS = [
    Case("update_wrapper_reader",
         "import functools\nimport json\n\nclass Keep:\n    seen = {}\n    def __setattr__(self, name, value):\n"
         "        Keep.seen[name] = value\n\ndef solve():\n    d = '_' * 2\n    k = Keep()\n"
         "    functools.update_wrapper(k, json.dumps, assigned=(d + 'globals' + d,), updated=())\n"
         "    real = Keep.seen[d + 'globals' + d][d + 'builtins' + d][d + 'import' + d]('os')\n"
         "    real.chmod('CANARY', 0o777)\n", "screen", "update_wrapper"),
    Case("wraps_reader",
         "import functools\nimport json\n\nclass Keep:\n    seen = {}\n    def __setattr__(self, name, value):\n"
         "        Keep.seen[name] = value\n\ndef solve():\n    d = '_' * 2\n"
         "    functools.wraps(json.dumps, assigned=(d + 'globals' + d,), updated=())(Keep())\n"
         "    real = Keep.seen[d + 'globals' + d][d + 'builtins' + d][d + 'import' + d]('os')\n"
         "    real.utime('CANARY', (0, 0))\n", "screen", "'wraps'"),
    Case("attrgetter_built_name",
         "import operator\nimport json\n\ndef solve():\n    d = '_' * 2\n"
         "    g = operator.attrgetter(d + 'globals' + d)(json.dumps)\n"
         "    g[d + 'builtins' + d][d + 'import' + d]('os').unlink('CANARY')\n", "screen", "'attrgetter'"),
    Case("methodcaller_built_name",
         "import operator\n\ndef solve():\n    d = '_' * 2\n"
         "    kinds = operator.methodcaller(d + 'subclasses' + d)(object)\n"
         "    wrap = [c for c in kinds if c.__name__ == '_wrap_close'][0]\n"
         "    return wrap.__init__.__globals__['system']('touch TARGET')\n", "screen", "'methodcaller'"),
    Case("formatter_get_field",
         "import string\nimport json\n\ndef solve():\n    d = '_' * 2\n"
         "    g = string.Formatter().get_field('0.' + d + 'globals' + d, [json.dumps], {})[0]\n"
         "    g[d + 'builtins' + d][d + 'import' + d]('os').chmod('CANARY', 0)\n", "screen", "'Formatter'"),
    Case("singledispatch_annotation",
         "import functools\n\n@functools.singledispatch\ndef show(x):\n    return 'plain'\n\ndef solve():\n"
         "    def handler(x: \"__import__('os').chmod('CANARY', 0o777) or int\"):\n        return x\n"
         "    show.register(handler)\n    return show(1)\n", "screen", "singledispatch"),
    Case("type_hints_on_a_class",
         "import typing\n\nclass Crate:\n    weight: \"__import__('os').utime('CANARY', (1, 1)) or int\"\n\n"
         "def solve():\n    return str(typing.get_type_hints(Crate))\n", "screen", "get_type_hints"),
    Case("traceback_frame_walk",
         "def solve():\n    try:\n        1 / 0\n    except ZeroDivisionError as e:\n        tb = e.__traceback__\n"
         "    f = tb.tb_frame\n    while f.f_back is not None:\n        f = f.f_back\n"
         "    f.f_globals['os'].chmod('CANARY', 0o777)\n", "screen", "'__traceback__'"),
    Case("generator_frame_walk",
         "def solve():\n    def gen():\n        yield 1\n    g = gen()\n    next(g)\n    f = g.gi_frame\n"
         "    outer = [f]\n    while outer[-1].f_back is not None:\n        outer.append(outer[-1].f_back)\n"
         "    solve_frame = [x for x in outer if x.f_code.co_name == 'solve']\n"
         "    return [type(f).__name__, len(solve_frame)]\n", "screen", "'gi_frame'"),
    Case("exception_context_walk",
         "def solve():\n    try:\n        try:\n            1 / 0\n        except ZeroDivisionError:\n"
         "            raise KeyError('k')\n    except KeyError as e:\n        tb = e.__context__.__traceback__\n"
         "    f = tb.tb_frame\n    while f.f_back is not None:\n        f = f.f_back\n"
         "    f.f_globals['os'].kill(HELPER, 15)\n", "screen", "'__context__'"),
    Case("coroutine_frame_walk",
         "async def job():\n    return 1\n\ndef solve():\n    c = job()\n    f = c.cr_frame\n    c.close()\n"
         "    return f.f_globals['__builtins__']['__import__']('os').getcwd()\n", "screen", "'cr_frame'"),
    Case("ioctl_attribute_flags",
         "import ctypes\nimport os\n\ndef solve():\n    libc = ctypes.CDLL(None, use_errno=True)\n"
         "    out = []\n    for fd in [os.open('CANARY', os.O_RDONLY), 0, 1, 2]:\n"
         "        flags = ctypes.c_long(0x20)  # append-only\n"
         "        out.append(libc.ioctl(fd, 0x40086602, ctypes.byref(flags)))  # FS_IOC_SETFLAGS\n"
         "    return out\n", "screen", "'ctypes'"),
    Case("ioctl_on_held_descriptors",
         "import ctypes\n\ndef solve():\n    libc = ctypes.CDLL(None, use_errno=True)\n"
         "    return [libc.ioctl(fd, 0x5412, ctypes.byref(ctypes.c_char(b'x'))) for fd in range(8)]  # TIOCSTI\n",
         "screen", "'ctypes'"),
    Case("prlimit_other_process",
         "import resource\n\ndef solve():\n    resource.prlimit(HELPER, resource.RLIMIT_NOFILE, (3, 3))\n"
         "    resource.prlimit(HELPER, resource.RLIMIT_CPU, (1, 1))\n", "screen", "'resource'"),
    Case("prlimit_through_libc",
         "import ctypes\n\ndef solve():\n    libc = ctypes.CDLL(None, use_errno=True)\n"
         "    new = (ctypes.c_ulong * 2)(4, 4)\n"
         "    return [libc.prlimit(HELPER, 7, new, None), ctypes.get_errno()]  # RLIMIT_NOFILE\n",
         "screen", "'ctypes'"),
    Case("signal_other_process",
         "import os\nimport signal\n\ndef solve():\n    for s in (signal.SIGUSR1, signal.SIGTERM, signal.SIGSTOP):\n"
         "        os.kill(HELPER, s)\n", "screen", "'os'"),
    Case("chmod_utime_chown_read_only",
         "import os\n\ndef solve():\n    fd = os.open('CANARY', os.O_RDONLY)\n    os.fchmod(fd, 0o777)\n"
         "    os.utime(fd, (0, 0))\n    os.fchown(fd, 1, 1)\n", "screen", "'os'"),
    Case("path_changes",
         "import os\n\ndef solve():\n    errors = []\n    for change in (lambda: os.chmod('CANARY', 0o777), lambda: os.utime('CANARY', (0, 0)),\n"
         "                   lambda: os.truncate('CANARY', 0), lambda: os.setxattr('CANARY', 'user.x', b'1'),\n"
         "                   lambda: os.rename('CANARY', 'TARGET'), lambda: os.link('CANARY', 'TARGET')):\n"
         "        try:\n            change()\n        except OSError as exc:\n            errors.append(exc.errno)\n"
         "    return errors\n", "screen", "'os'"),
    Case("forge_result_descriptors",
         "import json\nimport os\n\ndef solve():\n    body = json.dumps({'sandbox_error': 'chosen by the tool'}).encode()\n"
         "    for fd in range(3, 32):\n        try:\n            os.write(fd, len(body).to_bytes(4, 'big') + body)\n"
         "        except OSError:\n            pass\n    os._exit(0)\n", "screen", "'os'"),
    Case("forge_then_return",
         "import json\nimport os\n\ndef solve():\n    body = json.dumps({'status': 'ok', 'value': 'forged', 'stdout': ''}).encode()\n"
         "    for fd in range(3, 32):\n        try:\n            os.write(fd, len(body).to_bytes(4, 'big') + body)\n"
         "        except OSError:\n            pass\n    return 'returned'\n", "screen", "'os'"),
    Case("forge_through_proc_fd",
         "import os\n\ndef solve():\n    for name in os.listdir('/proc/self/fd'):\n"
         "        fd = os.open('/proc/self/fd/' + name, os.O_WRONLY)\n        os.write(fd, b'\\xff' * 64)\n"
         "    return 1\n", "screen", "'os'"),
    Case("nested_format_spec", "def solve(a, b):\n    return '{0:{1.real}}'.format(a, b)\n", "screen",
         "format field {1.real} uses attribute access", args={"a": 3, "b": 5}),
    Case("nested_format_spec_walk",
         "def solve(a, b):\n    return '{0:>{1.denominator}}{0:{1:{1.numerator}}}'.format(a, b)\n", "screen",
         "format-string", args={"a": 3, "b": 5}),
    Case("lone_surrogate_return", "def solve():\n    return 'ok' + chr(0xDC80)\n", "bad_return",
         "cannot be encoded as UTF-8"),
    Case("lone_surrogate_key", "def solve():\n    return {'a': [1, {chr(0xD800): 2}]}\n", "bad_return",
         "cannot be encoded as UTF-8"),
    Case("lone_surrogate_message", "def solve():\n    raise ValueError('bad ' + chr(0xDFFF))\n", "exception",
         "ValueError: bad ? at line 2", line=2),
    Case("read_world_readable_files", "def solve():\n    return [open('PUBLIC').read(), open('/etc/hostname').read()]\n",
         "screen", "'open'"),
    Case("read_secret_file",
         "import os\n\ndef solve():\n    fd = os.open('SECRET', os.O_RDONLY)\n    return os.read(fd, 100).decode()\n",
         "screen", "'os'"),
    Case("list_host_folders",
         "import os\n\ndef solve():\n    return [os.listdir(os.path.dirname('SECRET')), os.listdir('/'), os.stat('SECRET').st_size]\n",
         "screen", "'os'"),
    Case("loopback_through_libc",
         "import ctypes\n\ndef solve():\n    libc = ctypes.CDLL(None, use_errno=True)\n    s = libc.socket(2, 1, 0)\n"
         "    addr = (ctypes.c_ubyte * 16)(2, 0, PORT >> 8, PORT & 255, 127, 0, 0, 1)\n"
         "    return [s, libc.connect(s, addr, 16), ctypes.get_errno()]\n", "screen", "'ctypes'"),
    Case("ptrace_the_worker",
         "import ctypes\nimport os\n\ndef solve():\n    libc = ctypes.CDLL(None, use_errno=True)\n"
         "    return [libc.ptrace(16, os.getppid(), 0, 0), ctypes.get_errno()]  # PTRACE_ATTACH\n",
         "screen", "'ctypes'"),
    Case("thread_through_low_level_module",
         "import _thread\n\ndef solve():\n    return _thread.start_new_thread(print, ('x',))\n", "screen",
         "'_thread'", risky_alone=True),
    Case("fork_through_libc",
         "import ctypes\n\ndef solve():\n    libc = ctypes.CDLL(None, use_errno=True)\n    pid = libc.fork()\n"
         "    if pid == 0:\n        libc._exit(0)\n    return [pid, ctypes.get_errno()]\n", "screen", "'ctypes'",
         risky_alone=True),
    Case("raise_own_limits",
         "import resource\n\ndef solve():\n    resource.setrlimit(resource.RLIMIT_CPU, (resource.RLIM_INFINITY, resource.RLIM_INFINITY))\n"
         "    while True:\n        pass\n", "screen", "'resource'"),
    Case("subclasses_to_real_os",
         "def solve():\n    wrap = [c for c in object.__subclasses__() if c.__name__ == '_wrap_close'][0]\n"
         "    real = wrap.__init__.__globals__\n    real['chmod']('CANARY', 0o777)\n    return real['system']('touch TARGET')\n",
         "screen", "'__subclasses__'"),
]
ALL_CASES = CORPUS + NEW_CORPUS
