#!/usr/bin/env python3
"""Four sessions on four simulated cells at once, all indexed in one store (issue 19, "Tests that must exist").

Four copies of the TCP cell file with names of their own (invented cells), four loadtrim-sim processes, four
`loadtrim run` sessions started together on one data root with a migrated SQLite store: each session's end indexes
itself while the others write too (SQLite serialises writers; a writer that waits longer than the lock timeout
leaves its folder queued, and the next end drains it). After all four: whatever is still queued is indexed by
`store import --queued`, and then `history --cell` names each cell's one session with the result its own
summary.json holds, `history` lists all four, and `store check` finds nothing wrong. Checked against each
folder's summary.json and the README's exit codes.

Usage: store_four_cells.py --exe build/bin/loadtrim --sim build/bin/loadtrim-sim --src SOURCE_DIR --workdir DIR
"""
import argparse, json, os, re, shutil, subprocess, sys, time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
from testlib import FAILED, expect, finish, start_sim, env as testlib_env  # noqa: E402

ARGS = None






def tool(*argv, timeout=120):
    return subprocess.run([ARGS.exe] + list(argv), cwd=ARGS.workdir, env=testlib_env(ARGS.workdir), capture_output=True, text=True,
                          timeout=timeout)




def main():
    global ARGS
    ap = argparse.ArgumentParser()
    for a in ("--exe", "--sim", "--src", "--workdir"):
        ap.add_argument(a, required=True)
    ARGS = ap.parse_args()
    for a in ("exe", "sim", "src", "workdir"):
        setattr(ARGS, a, os.path.abspath(getattr(ARGS, a)))
    shutil.rmtree(ARGS.workdir, ignore_errors=True)
    os.makedirs(ARGS.workdir)
    r = tool("store", "migrate")
    expect("the store is made", r.returncode == 0, r.stdout + r.stderr)
    base = open(os.path.join(ARGS.src, "config/cells/sim-tcp.toml")).read()
    cells, sims, procs = [], [], []
    try:
        for i in range(4):
            name = "four-cells test bay %d (invented)" % (i + 1)
            text = re.sub(r'(?m)^name\s*=\s*".*"$', 'name = "%s"' % name, base, count=1)
            path = os.path.join(ARGS.workdir, "cell-%d.toml" % i)
            open(path, "w").write(text + "\n[checks]\nenforce = false\n")
            cells.append(name)
            sims.append(start_sim(ARGS.sim, ARGS.src))
        for i, (sim, port) in enumerate(sims):
            procs.append(subprocess.Popen(
                [ARGS.exe, "run", "--cell", os.path.join(ARGS.workdir, "cell-%d.toml" % i), "--target",
                 os.path.join(ARGS.src, "samples/targets/demo-hatchback.toml"), "--profile",
                 os.path.join(ARGS.src, "tests/data/wltp-iterative-short-warmup.toml"), "--port", str(port),
                 "--unattended", "--quiet", "--operator", "F. Our"],
                cwd=ARGS.workdir, env=testlib_env(ARGS.workdir), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True))
        outs = [p.communicate(timeout=240) for p in procs]
    finally:
        for sim, _ in sims:
            sim.kill()
            sim.wait()
    codes = [p.returncode for p in procs]
    expect("the four sessions reached a verdict (exit 0 or 1 each): %s" % codes, all(c in (0, 1) for c in codes),
           "\n".join(o[1][-300:] for o in outs))
    r = tool("store", "import", "--queued")
    expect("whatever is still queued is indexed (exit 0)", r.returncode == 0, r.stdout + r.stderr)
    sessions = os.path.join(ARGS.workdir, "data", "sessions")
    folders = {}
    for d in os.listdir(sessions):
        f = os.path.join(sessions, d)
        rec0 = json.loads(open(os.path.join(f, "events.jsonl")).readline())
        folders[rec0.get("cell", {}).get("name") if isinstance(rec0.get("cell"), dict) else rec0.get("cell")] = f
    for name in cells:
        r = tool("history", "--cell", name, "--json")
        rows = json.loads(r.stdout).get("rows", []) if r.returncode == 0 else []
        f = folders.get(name)
        want = json.load(open(os.path.join(f, "summary.json"))).get("result") if f else None
        expect("history --cell '%s' names its one session with its result (%s)" % (name, want),
               len(rows) == 1 and f is not None and os.path.basename(rows[0]["folder"]) == os.path.basename(f) and
               rows[0]["result"] == want, r.stdout[-600:] + r.stderr)
    r = tool("history", "--json")
    rows = json.loads(r.stdout).get("rows", []) if r.returncode == 0 else []
    expect("history lists all four sessions", len(rows) == 4 and len({x["cell"] for x in rows}) == 4, len(rows))
    r = tool("store", "check")
    expect("store check finds nothing wrong (exit 0)", r.returncode == 0, r.stdout[-400:] + r.stderr)
    return finish()


if __name__ == "__main__":
    sys.exit(main())
