#!/usr/bin/env python3
"""Each layer uses only the layers below it (DEVELOPERS.md, "Architecture"): every #include between two
folders of src/ and dyno-adapters/ must point to a lower rank. The ranks are the picture in DEVELOPERS.md
written as numbers; a new folder must be given one here. Fails listing each include that points up or
sideways."""
import os
import re
import sys

RANK = {
    'core': 0, 'process': 0,
    'physics': 1,
    'controller': 2,
    'config': 3,
    'adapters': 4,  # dyno-adapters/ and its dialect folders (line, modbus, framed): one layer
    'motion': 4, 'record': 4,
    'events': 5, 'report': 5, 'sim': 5, 'store': 5,
    'session': 6, 'checks': 6, 'adapters/inprocess': 6,
    'app': 7,
}


def layer(path):
    parts = path.split('/')
    if parts[0] == 'src':
        if parts[1] == 'session' and parts[2].startswith('events'):
            return 'events'
        return parts[1]
    if parts[0] == 'dyno-adapters':
        return 'adapters/inprocess' if len(parts) > 2 and parts[1] == 'inprocess' else 'adapters'
    return None


def main(root):
    files = []
    for top in ('src', 'dyno-adapters'):
        for dp, _, fn in os.walk(os.path.join(root, top)):
            files += [os.path.relpath(os.path.join(dp, f), root) for f in fn if f.endswith(('.cpp', '.hpp', '.h'))]
    known = {}
    for f in files:
        known['/'.join(f.split('/')[1:])] = f  # as included: "core/units.hpp", "line/line_protocol.hpp"
        known[f] = f
    include = re.compile(r'^\s*#\s*include\s*"([^"]+)"')
    bad, unknown, seen = [], set(), 0
    for f in files:
        with open(os.path.join(root, f), encoding='utf-8') as fh:
            for n, line in enumerate(fh, 1):
                m = include.match(line)
                if not m:
                    continue
                t = known.get(m.group(1)) or known.get(os.path.normpath(os.path.join(os.path.dirname(f), m.group(1))))
                if t is None:
                    continue  # a system or test header
                a, b = layer(f), layer(t)
                for x in (a, b):
                    if x not in RANK:
                        unknown.add(x)
                if a == b or a not in RANK or b not in RANK:
                    continue
                seen += 1
                if not RANK[b] < RANK[a]:
                    bad.append(f'{f}:{n}: {a} (rank {RANK[a]}) includes {m.group(1)} of {b} (rank {RANK[b]})')
    for u in sorted(unknown):
        print(f'folder "{u}" has no rank in tests/sources/layers.py: give it one from the DEVELOPERS.md picture')
    for b in bad:
        print(b)
    if bad or unknown:
        return 1
    print(f'{seen} includes between layers, every one pointing down')
    return 0


if __name__ == '__main__':
    sys.exit(main(sys.argv[1]))
