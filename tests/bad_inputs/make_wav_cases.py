#!/usr/bin/env python3
"""Write the WAV cases of tests/bad_inputs/cases/ with Python's own `wave`
module (standard library; shares no code with lobeflow), then bend them the
way real files come bent:

- odd_chunk_pad.wav: an odd-sized chunk ("note", 5 bytes) and its pad byte
  between 'fmt ' and 'data' -- a valid RIFF file; `wave` reads it back here.
- streaming_size.wav: the data size is the placeholder 0xFFFFFFFF a writer
  leaves while streaming; the data runs to the end of the file.
- rf64.wav, rifx.wav: the 64-bit and big-endian variants lobeflow refuses.
- empty_data.wav: a valid header with no frames.

The frames of the readable cases are listed in wav_cases.json (int16 codes,
interleaved) for the test to compare with.
"""
import io
import json
import os
import struct
import wave

HERE = os.path.dirname(os.path.abspath(__file__))
CASES = os.path.join(HERE, "cases")

RATE = 8000
# Two channels (I, Q) of a short ramp pair: 32 frames.
CODES = []
for k in range(32):
    CODES += [k * 1000 - 16000, 15000 - k * 900]


def plain_wav(codes, channels=2):
    buf = io.BytesIO()
    with wave.open(buf, "wb") as w:
        w.setnchannels(channels)
        w.setsampwidth(2)
        w.setframerate(RATE)
        w.writeframes(struct.pack("<%dh" % len(codes), *codes))
    return buf.getvalue()


def chunks(data):
    """(id, body) of each chunk after the RIFF/WAVE header."""
    at, out = 12, []
    while at + 8 <= len(data):
        cid, size = data[at:at + 4], struct.unpack("<I", data[at + 4:at + 8])[0]
        out.append((cid, data[at + 8:at + 8 + size]))
        at += 8 + size + (size & 1)
    return out


def riff(parts, magic=b"RIFF"):
    body = b"WAVE"
    for cid, payload in parts:
        body += cid + struct.pack("<I", len(payload)) + payload
        if len(payload) & 1:
            body += b"\0"
    return magic + struct.pack("<I", len(body)) + body


def write(name, data):
    with open(os.path.join(CASES, name), "wb") as f:
        f.write(data)


def main():
    base = plain_wav(CODES)
    parts = dict(chunks(base))
    fmt, frames = parts[b"fmt "], parts[b"data"]

    odd = riff([(b"fmt ", fmt), (b"note", b"lobes"), (b"data", frames)])
    with wave.open(io.BytesIO(odd), "rb") as w:
        got = w.readframes(w.getnframes())
    assert got == frames, "Python's wave must read the padded file"
    write("odd_chunk_pad.wav", odd)

    streaming = bytearray(riff([(b"fmt ", fmt), (b"data", frames)]))
    streaming[4:8] = struct.pack("<I", 0xFFFFFFFF)
    data_at = streaming.index(b"data")
    streaming[data_at + 4:data_at + 8] = struct.pack("<I", 0xFFFFFFFF)
    write("streaming_size.wav", bytes(streaming))

    rf64 = bytearray(riff([(b"fmt ", fmt), (b"data", frames)], magic=b"RF64"))
    write("rf64.wav", bytes(rf64))
    # RIFX: the same layout with big-endian sizes and samples.
    be_frames = struct.pack(">%dh" % len(CODES), *CODES)
    rifx = b"RIFX" + struct.pack(">I", 4 + 8 + len(fmt) + 8 + len(be_frames)) + b"WAVE"
    rifx += b"fmt " + struct.pack(">I", len(fmt)) + fmt + b"data" + struct.pack(">I", len(be_frames)) + be_frames
    write("rifx.wav", rifx)

    write("empty_data.wav", plain_wav([]))

    with open(os.path.join(HERE, "wav_cases.json"), "w") as f:
        json.dump({"rate": RATE, "channels": 2, "codes": CODES}, f)
        f.write("\n")


if __name__ == "__main__":
    main()
