#!/usr/bin/env python3
"""Renders docs/protocol.md from docs/src/protocol.md.in: numbers the example lines and appends their CRCs,
computed with Python's binascii.crc_hqx (CRC-CCITT, poly 0x1021) from an initial 0xFFFF — an implementation
independent of loadtrim's, so the protocol test also cross-checks our CRC."""
import binascii, pathlib, re, sys

here = pathlib.Path(__file__).resolve().parent
src = (here / "protocol.md.in").read_text()
seq = {">": 1, "<": 0}
out = []
for line in src.splitlines():
    m = re.match(r"^@([<>]) (.*)$", line)
    if not m:
        out.append(line)
        continue
    side, body = m.groups()
    body = f"{seq[side]} {body}"
    seq[side] += 1
    crc = binascii.crc_hqx(body.encode("ascii"), 0xFFFF)
    out.append(f"{side} {body}*{crc:04X}")
(here.parent / "protocol.md").write_text("\n".join(out) + "\n")
