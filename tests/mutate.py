"""Mutations of valid input files for the bad-input suite (tests/test_fuzz_*.py).

Three kinds, drawn by hypothesis: byte edits (flip, insert, delete,
truncate, duplicate), tokens known to break readers inserted anywhere or in
place of a number (integers of hundreds and thousands of digits, 1e300, NaN,
NUL, invalid UTF-8, brackets, quotes), and field edits of a parsed TOML
document (a value replaced by one of another type, a key removed or added).

``TEM_FUZZ_EXAMPLES=200`` (environment) shortens a local run; CI and
``make test`` use the default of 2000 examples per reader.
"""
from __future__ import annotations

import copy
import datetime as dt
import re

from hypothesis import settings
from hypothesis import strategies as st

# Hypothesis (6.13x) also draws numbers and strings it finds in the local modules imported so
# far, so with derandomize=True the examples still depended on which test files a run (or an
# xdist worker) had imported. An empty pool makes every run draw the same examples.
try:
    from hypothesis.internal.conjecture import providers as _providers

    _NO_LOCAL_CONSTANTS = _providers.Constants()
    _providers._get_local_constants = lambda: _NO_LOCAL_CONSTANTS
except (ImportError, AttributeError, TypeError):      # another hypothesis version: no pool
    pass

#: Deterministic, 2000 examples per reader (issue 9); no deadline (the machine is shared).
FUZZ = settings(max_examples=int(__import__("os").environ.get("TEM_FUZZ_EXAMPLES", 2000)), deadline=None, derandomize=True, database=None,
                suppress_health_check=list(__import__("hypothesis").HealthCheck))

TOKENS = [b"9" * 400, b"9" * 5000, b"-" + b"9" * 700, b"1e300", b"-1e300", b"1e999", b"nan",
          b"inf", b"-inf", b"\x00", b"\xff\xfe", b"\xc3(", b"\xed\xa0\x80", b'"', b"'", b"[",
          b"]", b"{", b"}", b"=", b",", b"\n", b"\r\n", b"#", b"-", b"0", b"-1", b"1e12",
          b"true", b"[]", b"{}", b"[[station]]", b"[transmitter]", b'"\x00"', b"\\u0000",
          b"1979-05-27T07:32:00Z", b"0x7fffffff", b"\t", b";", b" ", b"2e-300", b"[" * 60,
          b"{a=" * 40, b'"EM\x0001"', b"EM01", b'"\xff"', b"1_000_000", b"+", b"0.0", b"1e-30",
          b"9999-12-31T23:59:59Z", b"0001-01-01T00:00:00Z", b"-0", b"x,y", b",,,", b'"""',
          b"\xef\xbb\xbf", b"\x1b[31m"]

_NUMBER = re.compile(rb"-?\d+(?:\.\d+)?(?:[eE][-+]?\d+)?")


@st.composite
def byte_mutation(draw, base: bytes) -> bytes:
    """1 to 4 edits of ``base``: byte flips, inserted tokens, numbers replaced, cuts."""
    data = bytearray(base)
    for _ in range(draw(st.integers(1, 4))):
        op = draw(st.sampled_from(["flip", "token", "number", "number", "delete", "truncate",
                                   "duplicate", "random"]))
        pos = draw(st.integers(0, max(len(data) - 1, 0)))
        if op == "flip" and data:
            data[pos] = draw(st.integers(0, 255))
        elif op == "token":
            data[pos:pos] = draw(st.sampled_from(TOKENS))
        elif op == "number":
            spans = [m.span() for m in _NUMBER.finditer(bytes(data))]
            if spans:
                a, b = draw(st.sampled_from(spans))
                data[a:b] = draw(st.sampled_from(TOKENS[:12] + [b"0", b"-1", b"1e12", b'"12"',
                                                               b"[1]", b"{}", b"true"]))
        elif op == "delete":
            data[pos:pos + draw(st.integers(1, 40))] = b""
        elif op == "truncate":
            del data[pos:]
        elif op == "duplicate":
            n = draw(st.integers(1, 200))
            data[pos:pos] = data[pos:pos + n]
        else:
            data[pos:pos] = draw(st.binary(min_size=1, max_size=16))
    return bytes(data)


def toml_values():
    """Values of every TOML type, with extreme numbers and hostile text."""
    return st.one_of(
        st.sampled_from([10**400, -10**400, 10**1000, 10**18, -1, 0, 1, 2**63, 1e300, -1e300,
                         float("nan"), float("inf"), 5e-324, 1e12, True, False, "", "\x00",
                         "EM\x0001", "a/b", "..", "12", "1e300", "nan", " EM01", "x" * 500,
                         [], {}, [[]], [1, 2], ["a"], [[1e300, 0], [0, 0]], {"a": 1},
                         [{"x": 1}], dt.datetime(1979, 5, 27, 7, 32),
                         dt.datetime(9999, 12, 31), dt.date(2025, 1, 1), dt.time(7, 32)]),
        st.integers(), st.floats(), st.text(max_size=12), st.booleans(),
        st.lists(st.one_of(st.integers(-10**30, 10**30), st.floats(), st.text(max_size=4)),
                 max_size=4),
    )


def _paths(node, prefix=()):
    out = [prefix] if prefix else []
    if isinstance(node, dict):
        for k, v in node.items():
            out += _paths(v, prefix + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            out += _paths(v, prefix + (i,))
    return out


@st.composite
def toml_mutation(draw, doc: dict) -> bytes:
    """The TOML text of ``doc`` with 1 to 3 fields replaced, removed or added."""
    import tomli_w

    d = copy.deepcopy(doc)
    for _ in range(draw(st.integers(1, 3))):
        paths = _paths(d)
        if not paths:
            break
        path = draw(st.sampled_from(paths))
        parent = d
        for k in path[:-1]:
            parent = parent[k]
        op = draw(st.sampled_from(["set", "set", "set", "delete", "add"]))
        if op == "set":
            parent[path[-1]] = draw(toml_values())
        elif op == "delete":
            del parent[path[-1]]
        elif isinstance(parent, dict):
            parent[draw(st.sampled_from(["extra", "\x00", "id", "x", "kind", "files"]))] = \
                draw(toml_values())
    try:
        return tomli_w.dumps(d).encode()
    except (TypeError, ValueError):      # e.g. a table inside an array of numbers
        return tomli_w.dumps(doc).encode() + b"\n= 1\n"


def one_line_naming(exc, *names) -> None:
    """The error is one line and names one of ``names`` (file names)."""
    msg = str(exc)
    assert "\n" not in msg and "\r" not in msg, msg
    assert any(str(n) in msg for n in names), msg
    assert len(msg) < 600, msg
