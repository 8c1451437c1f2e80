#!/usr/bin/env python3
"""The cell's notifiers end to end (issue 19 "Telling people", docs/notify.md): a real session against the
simulated controller, with a cell file whose `[notify] command` records what it gets on standard input and whose
`[notify] mail_to` goes to a stand-in mailer that keeps the message and then fails.

Checked against the session's own record (summary.json) and the README's exit codes, never the notifier's word:
  - the session's exit code is what its result says (0 accepted), though a notifier failed;
  - the command got one JSON object on standard input naming the session, the event "ended", the result, the exit
    code and the same summary as summary.json, and LOADTRIM_NOTIFY_EVENT in its environment;
  - the mailer got an RFC 5322 message (To: the configured address, a Subject naming the cell and the result) and
    its failure is on stderr and in <data root>/notify.log, beside the command's success;
  - a cell file whose notify.command is not an absolute path is refused before anything moves (exit 2), naming
    the key.

Usage: notify.py --exe build/bin/loadtrim --sim build/bin/loadtrim-sim --src SOURCE_DIR --workdir DIR
"""
import argparse, json, os, re, shutil, stat, subprocess, sys, time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
from testlib import FAILED, expect, finish, start_sim, env as testlib_env  # noqa: E402

ARGS = None








def script(name, text):
    path = os.path.join(ARGS.workdir, name)
    with open(path, "w") as f:
        f.write(text)
    os.chmod(path, os.stat(path).st_mode | stat.S_IXUSR)
    return path


def cell_with(name, notify):
    text = open(os.path.join(ARGS.src, "config/cells/sim-tcp.toml")).read()
    text += "\n[checks]\nenforce = false\n\n[notify]\n" + notify
    path = os.path.join(ARGS.workdir, name)
    open(path, "w").write(text)
    return path


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
    got = os.path.join(ARGS.workdir, "got.json")
    mail = os.path.join(ARGS.workdir, "mail.txt")
    recorder = script("recorder.sh", '#!/bin/sh\ncat > "%s"\necho "$LOADTRIM_NOTIFY_EVENT" > "%s.event"\n' % (got, got))
    mailer = script("mailer.sh", '#!/bin/sh\necho "$@" > "%s.args"\ncat > "%s"\necho "relay refused" >&2\nexit 75\n'
                    % (mail, mail))
    cell = cell_with("cell-notify.toml", 'command = ["%s"]\nmail_to = "cell-team@example.org"\nmailer = "%s"\n'
                     'timeout_s = 20\n' % (recorder, mailer))
    sessions = os.path.join(ARGS.workdir, "sessions")
    sim, port = start_sim(ARGS.sim, ARGS.src)
    try:
        p = subprocess.run([ARGS.exe, "run", "--cell", cell, "--target",
                            os.path.join(ARGS.src, "samples/targets/demo-hatchback.toml"), "--profile",
                            os.path.join(ARGS.src, "tests/data/wltp-iterative-short-warmup.toml"), "--port", str(port),
                            "--sessions", sessions, "--unattended", "--quiet", "--operator", "N. Otify"],
                           cwd=ARGS.workdir, env=testlib_env(ARGS.workdir), capture_output=True, text=True, timeout=150)
    finally:
        sim.kill()
        sim.wait()
    folders = [os.path.join(sessions, d) for d in os.listdir(sessions)] if os.path.isdir(sessions) else []
    expect("one session folder", len(folders) == 1, str(folders))
    if len(folders) != 1:
        print(p.stdout + p.stderr)
        return 1
    summary = json.load(open(os.path.join(folders[0], "summary.json")))
    result = summary.get("result", summary.get("outcome"))
    want = {"accepted": 0, "not-accepted": 1}.get(result)
    expect("the exit code is the result's (README: 0 accepted, 1 not accepted) though a notifier failed",
           want is not None and p.returncode == want, "exit %d, result %s\n%s" % (p.returncode, result, p.stderr))
    msg = json.loads(open(got).read()) if os.path.exists(got) else {}
    expect("the command got one JSON object naming the session, 'ended' and the result",
           msg.get("what") == "session" and msg.get("event") == "ended" and msg.get("result") == result and
           msg.get("id") == os.path.basename(folders[0]) and msg.get("exit_code") == p.returncode, str(msg)[:500])
    expect("the command got the session's summary.json", msg.get("summary") == summary)
    expect("the command had LOADTRIM_NOTIFY_EVENT=ended",
           os.path.exists(got + ".event") and open(got + ".event").read().strip() == "ended")
    text = open(mail).read() if os.path.exists(mail) else ""
    expect("the mailer got an RFC 5322 message to the configured address",
           text.startswith("To: cell-team@example.org\n") and
           re.search(r"^Subject: loadtrim: cell sim-cell-tcp \(invented\): session \S+ ended: " + re.escape(result) +
                     "$", text, re.M) is not None and "\n\n" in text, text[:400])
    expect("the mailer was given the address after '--'",
           os.path.exists(mail + ".args") and open(mail + ".args").read().split() == ["-oi", "--",
                                                                                      "cell-team@example.org"])
    expect("the mailer's failure is on stderr with its code and error",
           "NOTIFIER FAILED mail to cell-team@example.org" in p.stderr and "exited 75: relay refused" in p.stderr,
           p.stderr[-800:])
    log = os.path.join(ARGS.workdir, "data", "notify.log")
    logged = open(log).read() if os.path.exists(log) else ""
    expect("notify.log has the command's success and the mailer's failure",
           "notified command" in logged and "NOTIFIER FAILED mail to" in logged, logged)

    bad = cell_with("cell-bad.toml", 'command = ["notify.sh"]\n')
    r = subprocess.run([ARGS.exe, "run", "--cell", bad, "--target",
                        os.path.join(ARGS.src, "samples/targets/demo-hatchback.toml"), "--port", "1", "--unattended",
                        "--quiet"], cwd=ARGS.workdir, env=testlib_env(ARGS.workdir), capture_output=True, text=True, timeout=60)
    expect("a relative notify.command is refused before anything moves (exit 2), naming the key",
           r.returncode == 2 and "notify.command" in r.stderr and "absolute path" in r.stderr, r.stderr[-600:])

    return finish()


if __name__ == "__main__":
    sys.exit(main())
