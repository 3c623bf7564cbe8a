"""What tool code may use: shared by the static screen (host) and the worker (standard library only).

This module is imported both as `runner.sandbox.policy` on the host and as a top-level `policy` inside the
worker process (`python -I -S -B`), so it imports nothing from the project.
"""

TOOL_FILENAME = "<tool>"

ALLOWED_MODULES = frozenset({
    "math", "itertools", "functools", "collections", "collections.abc", "datetime", "calendar", "re",
    "string", "fractions", "decimal", "statistics", "heapq", "bisect", "json", "operator", "typing",
    "dataclasses", "enum", "__future__",
})

DENIED_NAMES = frozenset({
    "open", "exec", "eval", "compile", "__import__", "globals", "locals", "vars", "getattr", "setattr",
    "delattr", "hasattr", "input", "breakpoint", "help", "exit", "quit", "memoryview", "dir", "copyright",
    "credits", "license", "__builtins__", "__loader__", "__spec__", "__build_class__",
})

DENIED_ATTRIBUTES = frozenset({
    "gi_frame", "gi_code", "gi_yieldfrom", "cr_frame", "cr_code", "cr_await", "ag_frame", "ag_code",
    "ag_await", "f_globals", "f_locals", "f_builtins", "f_back", "f_code", "f_trace", "tb_frame", "tb_next",
    "co_code", "co_consts", "co_names", "modules", "sys", "os", "posix", "builtins", "subprocess",
    "inspect", "importlib", "ctypes", "socket", "signal", "threading", "shutil", "attrgetter",
    "methodcaller", "get_type_hints", "ForwardRef", "Formatter", "vformat", "get_field",
    # Helpers that read or copy attributes by names given at run time, or evaluate annotation strings.
    "update_wrapper", "wraps", "WRAPPER_ASSIGNMENTS", "WRAPPER_UPDATES", "singledispatch",
    "singledispatchmethod", "make_dataclass",
})

# Methods a tool's class may not define: they run on attribute reads and writes, on class creation or on
# descriptor access, which is how attribute-copying helpers are turned into attribute readers.
DENIED_METHOD_NAMES = frozenset({
    "__setattr__", "__getattr__", "__getattribute__", "__delattr__", "__set_name__", "__init_subclass__",
    "__class_getitem__", "__get__", "__set__", "__delete__", "__reduce__", "__reduce_ex__", "__prepare__",
    "__instancecheck__", "__subclasscheck__", "__mro_entries__",
})

ALLOWED_DUNDER_NAMES = frozenset({"__name__"})
ALLOWED_DUNDER_ATTRIBUTES = frozenset({"__init__", "__name__"})
ALLOWED_DUNDER_STRINGS = frozenset({"__main__"})

SAFE_BUILTINS = (
    "abs", "aiter", "all", "anext", "any", "ascii", "bin", "bool", "bytearray", "bytes", "callable", "chr",
    "classmethod", "complex", "dict", "divmod", "enumerate", "filter", "float", "format", "frozenset",
    "hash", "hex", "id", "int", "isinstance", "issubclass", "iter", "len", "list", "map", "max", "min",
    "next", "object", "oct", "ord", "pow", "print", "property", "range", "repr", "reversed", "round", "set",
    "slice", "sorted", "staticmethod", "str", "sum", "super", "tuple", "type", "zip", "NotImplemented",
    "Ellipsis", "__build_class__",
)

# Modules that allowed modules import lazily from C code (datetime.strptime imports _strptime, strftime
# imports time). The screen rejects importing them in tool code, so only those C paths reach them.
LAZY_INTERNAL_MODULES = frozenset({"_strptime", "time"})

# Loaded in the worker before any call, so a call never needs to open a file: the allowed modules, what
# they import lazily, and the text codecs `str.encode`/`bytes.decode` look up by name.
PRELOADED_CODECS = (
    "encodings.ascii", "encodings.latin_1", "encodings.utf_8", "encodings.utf_16", "encodings.utf_16_le",
    "encodings.utf_16_be", "encodings.utf_32", "encodings.cp1252", "encodings.cp437", "encodings.unicode_escape",
    "encodings.raw_unicode_escape", "encodings.hex_codec", "encodings.base64_codec", "encodings.idna",
    "encodings.punycode", "unicodedata",
)
