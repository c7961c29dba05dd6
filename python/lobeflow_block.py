"""Write a lobeflow block in Python.

A graph block of kind ``external_program`` starts your script, sends it the
items arriving on its inputs on standard input, and turns what it writes on
standard output into items on its outputs. This module speaks that framing
(docs/external-blocks.md) and answers ``--describe``, so a block is a loop::

    import lobeflow_block

    DESCRIPTION = {
        "name": "double",
        "doc": "doubles every sample",
        "inputs": [{"name": "samples", "kind": "samples"}],
        "outputs": [{"name": "samples", "kind": "samples"}],
        "params": [{"name": "gain", "type": "number", "default": 2, "doc": "factor"}],
    }

    block = lobeflow_block.Block(DESCRIPTION)
    for item in block.items():
        item["iq"] = item["iq"] * block.params["gain"]
        block.emit(item)

Items are dicts with the fields of the framing. Samples, sweeps and lobe
segments carry ``iq`` (a numpy complex64 array, or a list of complex without
numpy) and ``sync`` / ``trigger`` (float32 arrays or None). Every item keeps
``index`` (first sample, counted from the capture's start) and ``rate``; pass
them on unchanged unless your block changes time.

Only the standard library is needed; numpy is used when it is installed.
"""

import array
import atexit
import json
import math
import os
import select
import sys

_NUMPY = []  # [module or None], filled on the first sample frame


def _numpy():
    """numpy when installed (imported only once samples arrive: it takes a
    while to load, and record-level blocks do not need it), else None."""
    if not _NUMPY:
        try:
            import numpy
        except ImportError:  # the framing works without it, only slower
            numpy = None
        _NUMPY.append(numpy)
    return _NUMPY[0]

DESCRIBE_FLAG = "--describe"

# Fields that hold real numbers: JSON has no NaN or infinities, so these
# travel as the strings "NaN", "Infinity" and "-Infinity".
FLOAT_FIELDS = frozenset(
    "rate amplitude noise_power snr var_ln_amp range_m error_deg sigma_deg snr_db ratio_db "
    "tracked_deg tracked_sigma_deg absolute_deg".split()
)
SAMPLE_KINDS = frozenset(("samples", "sweep", "segment"))
_LITTLE = sys.byteorder == "little"


class FramingError(Exception):
    """The input does not follow the framing."""


def _read_exact(stream, n):
    data = stream.read(n)
    if len(data) != n:
        raise FramingError("input ended inside a frame (%d of %d bytes)" % (len(data), n))
    return data


def _complex_from(data):
    np = _numpy()
    if np is not None:
        return np.frombuffer(data, dtype="<c8").copy()
    a = array.array("f", data)
    if not _LITTLE:
        a.byteswap()
    return [complex(a[i], a[i + 1]) for i in range(0, len(a), 2)]


def _real_from(data):
    np = _numpy()
    if np is not None:
        return np.frombuffer(data, dtype="<f4").copy()
    a = array.array("f", data)
    if not _LITTLE:
        a.byteswap()
    return a


def _complex_bytes(iq):
    np = _numpy()
    if np is not None:
        return np.asarray(iq, dtype="<c8").tobytes()
    a = array.array("f")
    for x in iq:
        a.append(x.real)
        a.append(x.imag)
    if not _LITTLE:
        a.byteswap()
    return a.tobytes()


def _real_bytes(values):
    np = _numpy()
    if np is not None:
        return np.asarray(values, dtype="<f4").tobytes()
    a = array.array("f", values)
    if not _LITTLE:
        a.byteswap()
    return a.tobytes()


def _to_json_number(x):
    if isinstance(x, float) and not math.isfinite(x):
        return "NaN" if math.isnan(x) else ("Infinity" if x > 0 else "-Infinity")
    return x


def _cell_out(value):
    if isinstance(value, float) and not math.isfinite(value):
        return {"num": _to_json_number(value)}
    return value


def _cell_in(value):
    if isinstance(value, dict) and "num" in value:
        return float(value["num"])
    return value


class Block:
    """One run of the block: answers ``--describe`` (and exits), otherwise
    reads the start line with the block's name, parameters and ports."""

    def __init__(self, description, argv=None, stdin=None, stdout=None):
        argv = sys.argv if argv is None else argv
        if DESCRIBE_FLAG in argv[1:]:
            sys.stdout.write(json.dumps(description, indent=1) + "\n")
            sys.stdout.flush()
            sys.exit(0)
        self._in = stdin if stdin is not None else sys.stdin.buffer
        if stdout is None:
            # A buffer of our own: standard output may be unbuffered
            # (PYTHONUNBUFFERED, -u), which costs a system call per write.
            stdout = os.fdopen(sys.stdout.fileno(), "wb", buffering=1 << 16, closefd=False)
            atexit.register(stdout.flush)
        self._out = stdout
        start = self._read_header()
        if start is None or start.get("kind") != "start":
            raise FramingError("expected the start line from lobeflow (run this script from a graph)")
        self.name = start["block"]
        self.params = start["params"]
        self.inputs = start["inputs"]
        self.outputs = start["outputs"]

    def _read_header(self):
        line = self._in.readline()
        if not line:
            return None
        if not line.endswith(b"\n"):
            raise FramingError("input ended inside a header line")
        return json.loads(line)

    def items(self):
        """Every input item, in order, as a dict; ends when the inputs do."""
        while True:
            # Whatever was emitted goes out before waiting for more input
            # (while more is already waiting, output is sent in larger writes).
            if not self._input_waiting():
                self._out.flush()
            item = self._read_header()
            if item is None:
                self._out.flush()
                return
            for key in FLOAT_FIELDS.intersection(item):
                if item[key] is not None:
                    item[key] = float(item[key])
            if item["kind"] == "row":
                item["fields"] = [[name, _cell_in(v)] for name, v in item["fields"]]
            if item["kind"] in SAMPLE_KINDS:
                n = item.pop("count")
                item["iq"] = _complex_from(_read_exact(self._in, 8 * n))
                for channel in ("sync", "trigger"):
                    item[channel] = _real_from(_read_exact(self._in, 4 * n)) if item.get(channel) else None
            yield item

    def _input_waiting(self):
        try:
            return bool(select.select([self._in], [], [], 0)[0])
        except (OSError, ValueError, TypeError):  # not a pollable stream
            return False

    def emit(self, item, port=None):
        """Write one item on output `port` (needed when there are several;
        otherwise taken from the item's ``port`` or the only output)."""
        head = {k: v for k, v in item.items() if k not in ("iq", "sync", "trigger")}
        if port is not None:
            head["port"] = port
        elif len(self.outputs) == 1:
            head["port"] = self.outputs[0]["name"]
        for key in FLOAT_FIELDS.intersection(head):
            head[key] = _to_json_number(head[key])
        if head.get("kind") == "row":
            head["fields"] = [[name, _cell_out(v)] for name, v in head["fields"]]
        payload = []
        if head.get("kind") in SAMPLE_KINDS:
            iq = item["iq"]
            head["count"] = len(iq)
            payload.append(_complex_bytes(iq))
            for channel in ("sync", "trigger"):
                values = item.get(channel)
                head[channel] = values is not None
                if values is not None:
                    if len(values) != len(iq):
                        raise ValueError("%s has %d samples, iq has %d" % (channel, len(values), len(iq)))
                    payload.append(_real_bytes(values))
        self._out.write(json.dumps(head, separators=(",", ":")).encode() + b"\n")
        for p in payload:
            self._out.write(p)

    def note(self, text):
        """Tell the person running the graph something (shown as a notice)."""
        sys.stderr.write(str(text) + "\n")
        sys.stderr.flush()
