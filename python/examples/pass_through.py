#!/usr/bin/env python3
"""Passes every item on unchanged: the cost of the external hop alone.
Started as `pass_through.py KIND` with KIND one of samples, sweep, segment,
dwell, estimate, row or notice; `delay` (seconds per item) makes it a slow
block, to watch backpressure."""
import os
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
import lobeflow_block  # noqa: E402

kind = next((a for a in sys.argv[1:] if not a.startswith("-")), "samples")
DESCRIPTION = {
    "name": "pass_through_" + kind,
    "doc": "passes every %s item on unchanged" % kind,
    "inputs": [{"name": "in", "kind": kind}],
    "outputs": [{"name": "out", "kind": kind, "required": False}],
    "params": [{"name": "delay", "type": "number", "unit": "s", "default": 0, "min": 0,
                "doc": "time to wait per item"}],
}

block = lobeflow_block.Block(DESCRIPTION)
delay = block.params["delay"]
for item in block.items():
    if delay > 0:
        time.sleep(delay)
    block.emit(item)
