#!/usr/bin/env python3
"""The console reads like the cell: no raw JSON reaches the operator, and operator.log holds the same sentences.

A short session against the simulator (200x real time) runs on a pseudo-terminal (so the progress line is drawn as
an operator sees it), is interrupted with SIGINT during its second coast-down, and is resumed to its verdict. Every
line of both consoles and of operator.log is checked:
  - no line is or contains a JSON object ('{"');
  - no number shows float noise (more than 6 decimals, e.g. 1653.4899999999998);
  - the progress line names a coast-down only while one runs (never "coast-down 1" while connecting);
  - its remaining-time estimate never drops by more than one coast-down's time beyond the cell time that passed
    (the longest recorded coast-down is the bound; it may rise when another run is needed);
and the kinds of line seen are named and counted, so a kind that vanished shows in the log. --json stays: every
line of a --json run is one JSON object. (Common practice, no source: these are the project's own console rules,
issue "a console that reads like the cell".)

Usage: console_text.py --exe build/bin/loadtrim --sim build/bin/loadtrim-sim --src SOURCE_DIR --workdir DIR
"""
import argparse
import json
import os
import pty
import re
import select
import shutil
import signal
import subprocess
import sys
import time

ARGS = None
PROBLEMS = []

NOISE = re.compile(r"\d+\.\d{7,}")
ANSI = re.compile(r"\x1b\[[0-9;]*[A-Za-z]")
RUN_STATES = ("writing the setting", "running up", "coasting down", "analysing")


def env():
    e = dict(os.environ)
    e["LOADTRIM_LOCK_DIR"] = os.path.join(ARGS.workdir, "locks")
    e["LOADTRIM_DATA_DIR"] = os.path.join(ARGS.workdir, "data")
    return e


def on_pty(argv, interrupt_when=None, timeout=120):
    """Runs the tool with stdout and stderr on a pseudo-terminal; sends SIGINT once `interrupt_when` appears."""
    master, slave = pty.openpty()
    p = subprocess.Popen([ARGS.exe] + argv, cwd=ARGS.workdir, env=env(), stdin=subprocess.DEVNULL, stdout=slave,
                         stderr=slave)
    os.close(slave)
    out = b""
    sent = False
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        r, _, _ = select.select([master], [], [], 0.1)
        if r:
            try:
                chunk = os.read(master, 65536)
            except OSError:  # the child closed its side
                break
            if not chunk:
                break
            out += chunk
        if interrupt_when and not sent and interrupt_when.encode() in out:
            p.send_signal(signal.SIGINT)
            sent = True
        if p.poll() is not None and not r:
            break
    try:  # the terminal closes a moment before the process is gone
        rc = p.wait(timeout=max(1.0, min(20.0, deadline - time.monotonic())))
    except subprocess.TimeoutExpired:
        p.kill()
        rc = p.wait(timeout=20)
    os.close(master)
    return rc, out.decode(errors="replace")


def start_sim():
    p = subprocess.Popen([ARGS.sim, "--truth", os.path.join(ARGS.src, "samples/truths/demo-hatchback.toml"), "--port",
                          "0", "--time-scale", "200"], stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline:
        line = p.stdout.readline()
        at = line.find("127.0.0.1:")
        if "listening" in line and at >= 0:
            digits = ""
            for ch in line[at + len("127.0.0.1:"):]:
                if not ch.isdigit():
                    break
                digits += ch
            return p, int(digits)
    p.kill()
    raise SystemExit("loadtrim-sim did not print its port")


def kind_of(line):
    """The kind of a console or operator.log line, for the count (the first words that say what it is)."""
    t = line.strip()
    t = re.sub(r"^\d{4}-\d\d-\d\dT[\d:.]+Z ", "", t)  # operator.log's time stamp
    if t.startswith("["):
        return "progress line"
    if re.match(r"^\d+ ", t):
        return "coast-down table row"
    for k in ("->", "now", "loss map", "controller", "target", "inertia", "first setting", "coast-down",
              "rollers stopped", "interrupted", "continuing", "session resumed", "session started", "accepted",
              "final set", "warm-up", "timing", "warming trend", "speed limit", "sealed", "report", "session folder",
              "simulated", "loadtrim", "stopped", "run", "(worst N", "interrupted:"):
        if t.startswith(k):
            return k
    return t.split(" ")[0] if t else "blank"


def check_lines(where, text, kinds):
    state = None
    for raw in text.replace("\r", "\n").splitlines():
        line = ANSI.sub("", raw)
        if not line.strip():
            continue
        kinds.setdefault(where, {}).setdefault(kind_of(line), 0)
        kinds[where][kind_of(line)] += 1
        if '{"' in line:
            PROBLEMS.append("%s: a JSON object reached it: %s" % (where, line))
        else:
            try:
                json.loads(line)
                PROBLEMS.append("%s: a line parses as JSON: %s" % (where, line))
            except ValueError:
                pass
        if NOISE.search(line):
            PROBLEMS.append("%s: float noise: %s" % (where, line))
        m = re.match(r"^\s*\[([^\]]+)\](.*)$", line)
        if m:
            state = m.group(1)
            if "coast-down" in m.group(2) and state not in RUN_STATES:
                PROBLEMS.append("%s: the progress line names a coast-down while %s: %s" % (where, state, line))


PROGRESS = re.compile(r"\[([^\]]+)\].*?cell time (\d+):(\d\d):(\d\d)\s+about (\d+):(\d\d):(\d\d) left")


def check_estimate(where, text, longest_coast_s):
    """The remaining-time estimate never drops by more than one coast-down's time beyond the cell time that passed
    (issue "a console that reads like the cell": an honest estimate; the longest recorded coast-down is the bound)."""
    prev = None
    seen = 0
    for raw in text.replace("\r", "\n").splitlines():
        m = PROGRESS.search(ANSI.sub("", raw))
        if not m:
            continue
        seen += 1
        g = [int(x) for x in m.groups()[1:]]
        cell = g[0] * 3600 + g[1] * 60 + g[2]
        left = g[3] * 3600 + g[4] * 60 + g[5]
        if prev:
            drop = (prev[1] - left) - (cell - prev[0])
            if drop > longest_coast_s + 2:  # +2: both clocks are printed in whole seconds
                PROBLEMS.append("%s: the estimate dropped %d s beyond the %d s that passed (more than one coast-down, "
                                "%.0f s): %s -> %s" % (where, prev[1] - left, cell - prev[0], longest_coast_s,
                                                      prev[2], m.group(0)))
        prev = (cell, left, m.group(0))
    if seen < 10:
        PROBLEMS.append("%s: only %d progress lines" % (where, seen))


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
    sessions = os.path.join(ARGS.workdir, "sessions")
    cell = os.path.join(ARGS.src, "config/cells/sim-tcp.toml")
    target = os.path.join(ARGS.src, "samples/targets/demo-hatchback.toml")
    common = ["--override-checks", "console test against the simulator", "--operator", "tester", "--unattended",
              "--sessions", sessions]
    kinds = {}
    sim, port = start_sim()
    try:
        rc1, out1 = on_pty(["run", "--cell", cell, "--target", target, "--port", str(port)] + common,
                           interrupt_when="[coasting down] coast-down 2")
        if rc1 != 4:
            PROBLEMS.append("the interrupted run exited %d, expected 4 (README, Exit codes)" % rc1)
        folders = sorted(os.listdir(sessions)) if os.path.isdir(sessions) else []
        if len(folders) != 1:
            raise SystemExit("expected one session folder, found %s\n%s" % (folders, out1))
        folder = os.path.join(sessions, folders[0])
        rc2, out2 = on_pty(["resume", folder, "--port", str(port), "--rewarm-s", "60"] + common[:-2])
        if rc2 not in (0, 1):
            PROBLEMS.append("the resumed run exited %d, expected a verdict (0 or 1)" % rc2)
        # --json stays for scripts: every stdout line one JSON object. Its profile, the shipped one with a key
        # it does not know, loads with a warning: the record keeps the warning (file, key, line) and the
        # report lists it (docs/session.md, session_started's combination_warnings).
        profile = os.path.join(ARGS.workdir, "wltp-iterative-with-a-typo.toml")
        with open(os.path.join(ARGS.src, "config/profiles/wltp-iterative.toml")) as src, open(profile, "w") as dst:
            dst.write(src.read() + "\n[invented_table]\nwarm_upp = 1\n")
        before = set(os.listdir(sessions))
        p = subprocess.run([ARGS.exe, "run", "--cell", cell, "--target", target, "--port", str(port), "--json",
                            "--profile", profile] + common,
                           cwd=ARGS.workdir, env=env(), capture_output=True, text=True, timeout=120)
        new = sorted(set(os.listdir(sessions)) - before)
        if len(new) != 1:
            PROBLEMS.append("the --json run made %d session folders, expected 1" % len(new))
        else:
            with open(os.path.join(sessions, new[0], "events.jsonl")) as f:
                started = next((r for r in map(json.loads, f) if r.get("type") == "session_started"), {})
            warned = [w for w in started.get("combination_warnings", []) if "invented_table" in w]
            if not warned or "unknown key" not in warned[0] or "line" not in warned[0]:
                PROBLEMS.append("the profile's warning is not in the record: %s" % started.get("combination_warnings"))
            r = subprocess.run([ARGS.exe, "report", os.path.join(sessions, new[0])], cwd=ARGS.workdir, env=env(),
                               capture_output=True, text=True, timeout=120)
            html = os.path.join(sessions, new[0], "report.html")
            page = open(html).read() if os.path.exists(html) else ""
            if "Input warning when the session started" not in page or "invented_table" not in page:
                PROBLEMS.append("the report does not list the profile's warning (report exit %d)" % r.returncode)
        for line in p.stdout.splitlines():
            try:
                if not isinstance(json.loads(line), dict):
                    raise ValueError
            except ValueError:
                PROBLEMS.append("--json: a line is not one JSON object: %s" % line)
        if p.returncode not in (0, 1):
            PROBLEMS.append("the --json run exited %d" % p.returncode)
    finally:
        sim.kill()
        sim.wait()
    with open(os.path.join(folder, "events.jsonl")) as f:
        coasts = [r.get("duration_s", 0.0) for r in map(json.loads, f) if r.get("type") == "coastdown"]
    longest = max(coasts) if coasts else 0.0
    if longest <= 0.0:
        PROBLEMS.append("no coast-down duration recorded")
    check_estimate("console (interrupted run)", out1, longest)
    check_estimate("console (resumed run)", out2, longest)
    check_lines("console (interrupted run)", out1, kinds)
    check_lines("console (resumed run)", out2, kinds)
    with open(os.path.join(folder, "operator.log")) as f:
        check_lines("operator.log", f.read(), kinds)
    # The kinds the interruption and the resume must have shown (each as a sentence).
    for where, needed in (("console (interrupted run)", ["interrupted", "rollers stopped", "progress line"]),
                          ("console (resumed run)", ["continuing", "accepted"]),
                          ("operator.log", ["interrupted", "continuing", "rollers stopped", "coast-down"])):
        for k in needed:
            if kinds.get(where, {}).get(k, 0) == 0:
                PROBLEMS.append("%s: no line of kind %r" % (where, k))
    for where, ks in kinds.items():
        print("%s: %s" % (where, ", ".join("%s %d" % (k, n) for k, n in sorted(ks.items()))))
    if PROBLEMS:
        print("\n".join(PROBLEMS))
        print("\nconsole output, the last 4000 characters (interrupted run):\n" + out1[-4000:] + "\n(resumed run):\n" +
              out2[-4000:])
        return 1
    print("no JSON, no float noise, progress lines name coast-downs only while one runs")
    return 0


if __name__ == "__main__":
    sys.exit(main())
