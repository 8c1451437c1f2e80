#!/usr/bin/env python3
"""Pause and continue a running session (docs/session.md "Pause and continue").

Two short sessions against the simulator (20x real time, the short-warm-up test profile), each on a
pseudo-terminal as an operator sees it:
  1. paused during its first coast-down by `loadtrim pause FOLDER --by ... --why ...` from "another terminal"
     (this script), continued by `loadtrim continue FOLDER --by ...`;
  2. paused during the warm-up by SIGUSR1, continued by SIGUSR2 (the record names the user the signal came from).
Each must end accepted (exit 0), its folder must verify (`loadtrim verify`, exit 0), and its record must hold the
pause (who, why, during which step, rollers stopped) and the continue, the paused coast-down discarded, the pass
count started again after the re-warm. Also: `pause` on a folder where nothing runs, and `continue` while nothing
is paused, exit 2 with a message. The rules are the project's own (issue "pause and continue"; a pause is a
controlled stop to standstill: docs/safety.md), checked against the record; two consecutive passes after the
pause: GTR 15 Annex 4 §8.1.3.4.2 [text].

Usage: pause_continue.py --exe build/bin/loadtrim --sim build/bin/loadtrim-sim --src SOURCE_DIR --workdir DIR
"""
import argparse
import json
import os
import pty
import pwd
import re
import select
import shutil
import signal
import subprocess
import sys
import time

ARGS = None
PROBLEMS = []


def check(cond, what):
    print(("ok: " if cond else "FAIL: ") + what)
    if not cond:
        PROBLEMS.append(what)


def env():
    e = dict(os.environ)
    e["LOADTRIM_LOCK_DIR"] = os.path.join(ARGS.workdir, "locks")
    e["LOADTRIM_DATA_DIR"] = os.path.join(ARGS.workdir, "data")
    return e


def tool(*argv, timeout=60):
    return subprocess.run([ARGS.exe] + list(argv), cwd=ARGS.workdir, env=env(), capture_output=True, text=True,
                          timeout=timeout)


def start_sim():
    p = subprocess.Popen([ARGS.sim, "--truth", os.path.join(ARGS.src, "samples/truths/demo-hatchback.toml"), "--port",
                          "0", "--time-scale", "20"], stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline:
        line = p.stdout.readline()
        m = re.search(r"listening.*127\.0\.0\.1:(\d+)", line)
        if m:
            return p, int(m.group(1))
    p.kill()
    raise SystemExit("loadtrim-sim did not print its port")


def session_on_pty(argv, script, timeout=240):
    """Runs the tool on a pseudo-terminal; script(out, proc, folder) is called as output arrives and acts once each
    of its steps' words appear. Returns (exit code, output, folder)."""
    master, slave = pty.openpty()
    p = subprocess.Popen([ARGS.exe] + argv, cwd=ARGS.workdir, env=env(), stdin=subprocess.DEVNULL, stdout=slave,
                         stderr=slave)
    os.close(slave)
    out = ""
    folder = None
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        r, _, _ = select.select([master], [], [], 0.05)
        if r:
            try:
                chunk = os.read(master, 65536)
            except OSError:
                break
            if not chunk:
                break
            out += chunk.decode(errors="replace")
        if folder is None:
            m = re.search(r"session folder: (\S+)", out)
            if m:
                folder = m.group(1)
        if folder:
            script(out, p, folder)
        if p.poll() is not None and not r:
            break
    try:  # the terminal closes a moment before the process is gone
        rc = p.wait(timeout=max(1.0, min(20.0, deadline - time.monotonic())))
    except subprocess.TimeoutExpired:
        p.kill()
        PROBLEMS.append("the session did not end within %d s" % timeout)
        rc = p.wait(timeout=20)
    os.close(master)
    return rc, out, folder


def records(folder):
    with open(os.path.join(folder, "events.jsonl")) as f:
        return [json.loads(l) for l in f if l.strip()]


class Steps:
    """Each step (words to wait for, action) runs once, in order."""

    def __init__(self, steps):
        self.steps = list(steps)
        self.done = 0

    def __call__(self, out, proc, folder):
        while self.done < len(self.steps) and self.steps[self.done][0] in out:
            self.steps[self.done][1](proc, folder)
            self.done += 1


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
    # The cell signs its records (a folder verifies fully only when signed: docs/records.md).
    k = tool("keys", "create", "--cell", "sim-cell-tcp (invented)")
    m = re.search(r"fingerprint: (sha256:[0-9a-f]{64})", k.stdout)
    if k.returncode != 0 or not m:
        raise SystemExit("keys create failed: %s %s" % (k.stdout, k.stderr))
    cell = os.path.join(ARGS.workdir, "keyed.toml")
    with open(os.path.join(ARGS.src, "config/cells/sim-tcp.toml")) as f, open(cell, "w") as out:
        out.write(f.read() + '\n[records]\npublic_key = "%s"\n' % m.group(1))
    target = os.path.join(ARGS.src, "samples/targets/demo-hatchback.toml")
    profile = os.path.join(ARGS.src, "tests/data/wltp-iterative-short-warmup.toml")
    me = pwd.getpwuid(os.getuid()).pw_name

    # Mistakes first: nothing runs in an empty folder.
    empty = os.path.join(ARGS.workdir, "not-running")
    os.makedirs(empty)
    p = tool("pause", empty, "--by", "A. Tester", "--why", "test")
    check(p.returncode == 2 and "no session is running" in p.stderr,
          "pause where nothing runs: exit 2, 'no session is running' (got %d: %s)" % (p.returncode, p.stderr.strip()))
    p = tool("pause", os.path.join(ARGS.workdir, "missing"), "--by", "A. Tester", "--why", "test")
    check(p.returncode == 2, "pause on a missing folder: exit 2 (got %d)" % p.returncode)

    sim, port = start_sim()
    try:
        common = ["--cell", cell, "--target", target, "--profile", profile, "--port", str(port), "--override-checks",
                  "pause test against the simulator", "--operator", "tester", "--unattended", "--sessions", sessions,
                  "--rewarm-s", "30", "--first-setting", "standard"]
        answers = {}

        def ask(action, *extra):
            def act(proc, folder):
                r = tool(action, folder, "--by", "A. Tester", *extra)
                answers[action] = r
            return act

        def continue_while_not_paused(proc, folder):
            answers["early continue"] = tool("continue", folder, "--by", "A. Tester")

        # 1. The command from another terminal, during the first coast-down.
        rc, out, folder = session_on_pty(["run"] + common, Steps([
            ("[warming up]", continue_while_not_paused),
            ("[coasting down] coast-down 1", ask("pause", "--why", "a strap to check")),
            ("PAUSED", ask("continue", "--why", "strap checked")),
        ]))
        check(folder is not None, "session 1 printed its folder")
        e = answers.get("early continue")
        check(e is not None and e.returncode == 2 and "not paused" in e.stderr,
              "continue while not paused: exit 2, 'not paused' (got %r)" %
              (((e.returncode, e.stderr.strip()) if e else None),))
        for a in ("pause", "continue"):
            r = answers.get(a)
            check(r is not None and r.returncode == 0, "`loadtrim %s` exit 0 (got %r)" %
                  (a, (r.returncode, r.stderr.strip()) if r else "not run"))
        check(rc == 0, "session 1 (paused in a coast-down) accepted, exit 0 (got %d)" % rc)
        if folder:
            rs = records(folder)
            paused = [r for r in rs if r["type"] == "paused"]
            cont = [r for r in rs if r["type"] == "continued"]
            check(len(paused) == 1 and paused[0]["during"] == "coast-down" and paused[0]["by"] == "A. Tester" and
                  paused[0]["why"] == "a strap to check" and paused[0]["rollers_stopped"] is True and
                  paused[0]["source"].startswith("command"),
                  "record: one pause during the coast-down by A. Tester, why given, rollers stopped: %s" % paused)
            check(len(cont) == 1 and cont[0]["by"] == "A. Tester" and cont[0]["why"] == "strap checked",
                  "record: one continue by A. Tester: %s" % cont)
            disc = [r for r in rs if r["type"] == "coastdown_discarded" and "paused" in r.get("why", "")]
            check(len(disc) == 1, "record: the paused coast-down discarded (%d)" % len(disc))
            seq_c = cont[0]["seq"] if cont else 1 << 60
            passes = [r for r in rs if r["type"] == "coastdown" and r["seq"] > seq_c and r.get("usable") and
                      r["check"]["pass"]]
            check(len(passes) >= 2, "two passes after the continue (GTR 15 Annex 4 §8.1.3.4.2): %d" % len(passes))
            with open(os.path.join(folder, "report.html"), encoding="utf-8") as f:
                html_text = f.read()
            page_one = html_text.split('id="page-one"', 1)[-1].split("</section>", 1)[0]
            check("Paused during coast-down by A. Tester" in page_one and "Continued by A. Tester" in page_one,
                  "the report's page one names the pause and the continue")
            check(r["usable_coastdowns"] == r["coastdowns"] if (r := next((x for x in rs if x["type"] == "finished"),
                                                                        None)) else False,
                  "the paused run counts as neither usable nor unusable (summary)")
            v = tool("verify", folder)
            check(v.returncode == 0, "session 1's folder verifies (got %d: %s)" % (v.returncode, v.stdout[-300:] +
                                                                                 v.stderr[-300:]))

        # 2. Signals, during the warm-up.
        def sig(s):
            return lambda proc, folder: proc.send_signal(s)

        rc, out2, folder2 = session_on_pty(["run"] + common, Steps([
            ("[warming up]", sig(signal.SIGUSR1)),
            ("PAUSED", sig(signal.SIGUSR2)),
        ]))
        check(rc == 0, "session 2 (paused in the warm-up) accepted, exit 0 (got %d)" % rc)
        if folder2:
            rs = records(folder2)
            paused = [r for r in rs if r["type"] == "paused"]
            check(len(paused) == 1 and paused[0]["during"] == "warm-up" and paused[0]["by"] == me and
                  paused[0]["source"] == "signal" and paused[0]["rollers_stopped"] is True,
                  "record: one pause during the warm-up by %s (signal), rollers stopped: %s" % (me, paused))
            check(sum(r["type"] == "continued" for r in rs) == 1, "record: one continue")
            check(sum(r["type"] == "warm_up_ended" for r in rs) == 1,
                  "the paused warm-up did not end; the one after the continue did")
            v = tool("verify", folder2)
            check(v.returncode == 0, "session 2's folder verifies (got %d)" % v.returncode)
        if PROBLEMS:
            print("\nsession 1 console (last 3000 characters):\n" + out[-3000:])
            print("\nsession 2 console (last 3000 characters):\n" + out2[-3000:])
    finally:
        sim.kill()
        sim.wait()
    if PROBLEMS:
        print("\n%d problem(s):\n%s" % (len(PROBLEMS), "\n".join(PROBLEMS)))
        return 1
    print("pause and continue: both sessions accepted and verified")
    return 0


if __name__ == "__main__":
    sys.exit(main())
