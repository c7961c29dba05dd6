#!/usr/bin/env python3
"""Multiplies every complex sample by a constant gain (numpy), keeping the
sync and trigger channels, sample indices and rate as they came."""
import os
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
import lobeflow_block  # noqa: E402
import numpy as np  # noqa: E402

DESCRIPTION = {
    "name": "gain",
    "doc": "multiplies the complex samples by a constant",
    "inputs": [{"name": "samples", "kind": "samples", "doc": "chunks"}],
    "outputs": [{"name": "samples", "kind": "samples", "doc": "the same chunks, scaled"}],
    "params": [{"name": "gain", "type": "number", "default": 1, "doc": "linear factor (float32)"}],
}

block = lobeflow_block.Block(DESCRIPTION)
gain = np.float32(block.params["gain"])
for chunk in block.items():
    chunk["iq"] = chunk["iq"] * gain
    block.emit(chunk)
