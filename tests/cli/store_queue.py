#!/usr/bin/env python3
"""Sessions end while the lab's store is unavailable (issue 19: "the store down or slow during a session neither
stops nor slows it: the index entry is queued in the data root and ingested when the store is back, logged both
times"; docs/store.md "Indexed when it ends").

The store is the SQLite file of a scratch data root; "down" is another connection holding an exclusive lock on it
(sqlite's documented locking: BEGIN EXCLUSIVE keeps every other connection from reading or writing until it ends),
taken with Python's sqlite3 module. Each session is a real one (`loadtrim demo --in-process`). Checked:
  - a session ending while the store is locked ends as it would have (exit 0, accepted), its entry is queued in
    <data root>/queue/ and store.log says queued and unavailable;
  - a queued folder changed before the store is back does not verify: it is set aside (queue/refused/), named on
    stderr, and never indexed;
  - once the lock is gone, the next session's end indexes itself and every good queued folder, store.log says so,
    the queue is empty and `history` lists exactly the good sessions;
  - `store import --queued` drains a queue by hand: exit 5 while the store is still down (the entry kept), exit 0
    once it is back, and says so when there is nothing queued.

Usage: store_queue.py --exe build/bin/loadtrim --workdir DIR
"""
import argparse
import hashlib
import json
import os
import shutil
import sqlite3
import subprocess
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
from testlib import FAILED, expect, finish  # noqa: E402

ARGS = None


def run(argv, timeout=120):
    env = dict(os.environ)
    env["LOADTRIM_LOCK_DIR"] = os.path.join(ARGS.workdir, "locks")
    env["LOADTRIM_DATA_DIR"] = os.path.join(ARGS.workdir, "data")
    p = subprocess.run([ARGS.exe] + argv, cwd=ARGS.workdir, env=env, capture_output=True, text=True,
                       timeout=timeout)
    return p.returncode, p.stdout, p.stderr




def entry(folder):
    """The queue entry's file name: the folder's name and 16 hex digits of the SHA-256 of its path (docs/store.md)."""
    return os.path.basename(folder) + "-" + hashlib.sha256(folder.encode()).hexdigest()[:16] + ".json"


def in_refused(queue, folder):
    d = os.path.join(queue, "refused")
    stem = entry(folder)[:-5]
    return os.path.isdir(d) and any(f.startswith(stem + ".") for f in os.listdir(d))


def demo(what):
    rc, out, err = run(["demo", "--in-process", "--quiet"], timeout=300)
    folder = ""
    for line in (out + err).splitlines():
        if line.startswith("session folder: "):
            folder = line[len("session folder: "):].strip()
    # The session's own result, unchanged by the store (README exit codes: 0 accepted).
    expect(what + ": the session ended accepted (exit 0) with its folder", rc == 0 and os.path.isdir(folder),
           f"exit {rc}\n{out}{err}")
    return folder, out, err


def main():
    global ARGS
    ap = argparse.ArgumentParser()
    ap.add_argument("--exe", required=True)
    ap.add_argument("--workdir", required=True)
    ARGS = ap.parse_args()
    shutil.rmtree(ARGS.workdir, ignore_errors=True)
    os.makedirs(ARGS.workdir)
    data = os.path.join(ARGS.workdir, "data")
    store = os.path.join(data, "store.sqlite")
    queue = os.path.join(data, "queue")
    log = os.path.join(data, "store.log")

    rc, out, err = run(["store", "migrate"])
    expect("the store is made", rc == 0, out + err)

    # The store "down": an exclusive lock held by another connection.
    lock = sqlite3.connect(store, isolation_level=None, timeout=0)
    lock.execute("BEGIN EXCLUSIVE")
    a, _, err_a = demo("A (store locked)")
    b, _, _ = demo("B (store locked)")
    queued = sorted(f for f in os.listdir(queue) if f.endswith(".json")) if os.path.isdir(queue) else []
    expect("A and B are queued in the data root", queued == sorted([entry(a), entry(b)]), str(queued))
    expect("A's end said the store was unavailable and the folder queued",
           "store unavailable" in err_a and "queued" in err_a, err_a)
    text = open(log, encoding="utf-8").read() if os.path.exists(log) else ""
    expect("store.log says queued for A and B", ("queued session " + a) in text and ("queued session " + b) in text,
           text)
    expect("store.log says the store was unavailable", "store unavailable" in text, text)
    # B is changed while it waits: one byte of its first record.
    ev = os.path.join(b, "events.jsonl")
    raw = bytearray(open(ev, "rb").read())
    raw[raw.index(b'"seq"') + 1] = ord("S")
    open(ev, "wb").write(bytes(raw))
    lock.execute("ROLLBACK")
    lock.close()

    # The store back: the next session's end indexes itself and the queue.
    c, out_c, err_c = demo("C (store back)")
    text = open(log, encoding="utf-8").read()
    name = os.path.basename
    expect("store.log says A was indexed from the queue", ("indexed session " + name(a)) in text, text)
    expect("store.log says C was indexed", ("indexed session " + name(c)) in text, text)
    expect("B, changed while queued, is set aside and named on stderr",
           in_refused(queue, b) and "set aside " + b in err_c,
           err_c)
    left = [f for f in os.listdir(queue) if f.endswith(".json")]
    expect("the queue is empty", left == [], str(left))
    rc, out, err = run(["history", "--json"])
    rows = json.loads(out).get("rows", []) if rc == 0 and out.strip().startswith("{") else []
    folders = sorted(name(r.get("folder", "")) for r in rows)
    expect("history lists A and C, not B", folders == sorted([name(a), name(c)]), f"exit {rc}\n{out}{err}")

    # By hand: a folder queued while the store was locked is indexed by `store import --queued` once it is back.
    lock = sqlite3.connect(store, isolation_level=None, timeout=0)
    lock.execute("BEGIN EXCLUSIVE")
    d, _, _ = demo("D (store locked again)")
    rc, out, err = run(["store", "import", "--queued"])
    expect("store import --queued while the store is still locked fails and keeps D queued (exit 5)",
           rc == 5 and os.path.exists(os.path.join(queue, entry(d))), f"exit {rc}\n{out}{err}")
    lock.execute("ROLLBACK")
    lock.close()
    rc, out, err = run(["store", "import", "--queued"])
    expect("store import --queued indexes D once the store is back (exit 0)",
           rc == 0 and ("indexed session " + name(d)) in out and "queue" in out and
           not os.path.exists(os.path.join(queue, entry(d))), f"exit {rc}\n{out}{err}")
    # Nothing queued is said so.
    rc, out, err = run(["store", "import", "--queued"])
    expect("store import --queued with an empty queue (exit 0)", rc == 0 and "nothing queued" in out, out + err)

    return finish()


if __name__ == "__main__":
    sys.exit(main())
