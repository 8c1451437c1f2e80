#!/usr/bin/env python3
"""The record store through the command line (issue 19, docs/store.md): `store migrate`, `store import`,
`history` (table, CSV, JSON), `store check`, each with its exit code from the README's table (0 done, 2 refused or
bad input, 5 a folder that does not verify or is missing: the project's own contract with scripts, issue 19).
The session folder is a real one, made by `loadtrim demo --in-process` in a scratch data root. The CSV is read
back with Python's csv module (RFC 4180 quoting: a field with a comma is quoted). Nothing outside --workdir
changes.

Usage: store_cli.py --exe build/bin/loadtrim --workdir DIR
"""
import argparse
import csv
import io
import json
import os
import shutil
import sys

import subprocess

ARGS = None
FAILED = []


def run(argv, timeout=120):
    env = dict(os.environ)
    env["LOADTRIM_LOCK_DIR"] = os.path.join(ARGS.workdir, "locks")
    env["LOADTRIM_DATA_DIR"] = os.path.join(ARGS.workdir, "data")
    p = subprocess.run([ARGS.exe] + argv, cwd=ARGS.workdir, env=env, capture_output=True, text=True,
                       timeout=timeout)
    return p.returncode, p.stdout, p.stderr


def expect(what, ok, detail=""):
    print(("ok   " if ok else "FAIL ") + what)
    if not ok:
        FAILED.append(what)
        if detail:
            print("     " + detail.replace("\n", "\n     "))


def expect_run(what, argv, code, words=()):
    rc, out, err = run(argv)
    text = out + err
    missing = [w for w in words if w not in text]
    expect(what + f" (exit {code})", rc == code and not missing,
           f"exit {rc}, missing {missing}\n{text[-2000:]}")
    return rc, out, err


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

    # Never migrated on open: without `store migrate` there is no store, and nothing is created.
    expect_run("history before migrate is refused", ["history"], 2, ["store migrate"])
    expect("no store file was created by history", not os.path.exists(store))
    expect_run("migrate creates the store", ["store", "migrate"], 0, ["applied migration 1", "schema version"])
    expect_run("a second migrate does nothing", ["store", "migrate"], 0, ["already current"])

    rc, out, err = run(["demo", "--in-process", "--quiet"], timeout=300)
    folder = ""
    for line in (out + err).splitlines():
        if line.startswith("session folder: "):
            folder = line[len("session folder: "):].strip()
    expect("the demo made a session folder", rc == 0 and os.path.isdir(folder), f"exit {rc}\n{out}{err}")
    if not folder:
        print(f"{len(FAILED)} failed")
        return 1

    expect_run("import indexes the demo's session", ["store", "import", folder], 0, ["indexed session"])
    expect_run("importing it again adds nothing", ["store", "import", folder], 0, ["already indexed"])

    summary = json.load(open(os.path.join(folder, "summary.json")))
    rc, out, err = run(["history", "--vehicle", "DEMO-HB-01", "--json"])
    rows = json.loads(out)["rows"] if rc == 0 else []
    expect("history --vehicle --json lists the session", rc == 0 and len(rows) == 1
           and rows[0]["folder"] == os.path.abspath(folder), out + err)
    if rows:
        expect("its result and final setting are the folder's summary",
               rows[0]["result"] == summary["result"] and rows[0]["final_set"] == summary["final_set"],
               json.dumps(rows[0]))
    rc, out, err = run(["history", "--cell", "no such cell", "--json"])
    expect("history --cell of another cell lists nothing", rc == 0 and json.loads(out)["rows"] == [], out + err)

    rc, out, err = run(["history", "--since", "2000-01-01", "--csv"])
    table = list(csv.DictReader(io.StringIO(out, newline="")))
    expect("history --csv reads back as RFC 4180 CSV with one row", rc == 0 and len(table) == 1, out + err)
    if table:
        expect("the CSV row names the folder and its seal's state", table[0]["folder"] == os.path.abspath(folder)
               and table[0]["verify_outcome"] != "", json.dumps(table[0]))
    expect_run("history table", ["history"], 0, ["DEMO-HB-01", "1 row(s)"])

    expect_run("--since that is not a calendar date is refused", ["history", "--since", "2026-02-30"], 2,
               ["--since", "YYYY-MM-DD"])
    expect_run("--csv with --json is refused", ["history", "--csv", "--json"], 2)
    expect_run("importing what is not a folder is refused", ["store", "import",
                                                              os.path.join(ARGS.workdir, "nothing")], 2,
               ["not a folder"])

    tampered = os.path.join(ARGS.workdir, "tampered")
    shutil.copytree(folder, tampered)
    log = open(os.path.join(tampered, "events.jsonl"), "rb").read()
    at = log.index(b"DEMO-HB-01")
    log = log[:at] + b"X" + log[at + 1:]
    open(os.path.join(tampered, "events.jsonl"), "wb").write(log)
    expect_run("a folder with one byte changed is refused as broken", ["store", "import", tampered], 5,
               ["broken", "not indexed"])

    expect_run("store check with every folder in place", ["store", "check"], 0, ["0 finding(s)"])
    shutil.rmtree(folder)
    expect_run("store check finds the deleted folder", ["store", "check"], 5, ["missing", folder])

    print(f"{len(FAILED)} failed")
    return 1 if FAILED else 0


if __name__ == "__main__":
    sys.exit(main())
