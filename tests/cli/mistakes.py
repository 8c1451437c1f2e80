#!/usr/bin/env python3
"""The operator's mistakes, one row each: the command line, the exit code and the words the message must hold.

The exit codes are the README's table ("Exit codes"): 0 accepted or done, 2 refused / bad input, 3 controller or link
fault, 5 a record that cannot be written or read (common practice, no source: the codes are this project's own
contract with scripts). Each row names what it checks; every row runs in a scratch folder with its own data root and
lock folder, so nothing outside it changes.

Usage: mistakes.py --exe build/bin/loadtrim --sim build/bin/loadtrim-sim --src SOURCE_DIR --workdir DIR
"""
import argparse
import json
import os
import pty
import select
import shutil
import socket
import subprocess
import sys
import time

ARGS = None
FAILED = []


def run(argv, cwd, stdin_text=None, timeout=60, exe=None):
    """Runs loadtrim (or `exe`). A run past `timeout` is killed and reported as exit -1 with "(timed out)": a tool
    that should have refused at once, but started, fails its row instead of the whole script."""
    env = dict(os.environ)
    env["LOADTRIM_LOCK_DIR"] = os.path.join(ARGS.workdir, "locks")
    env["LOADTRIM_DATA_DIR"] = os.path.join(ARGS.workdir, "data")
    try:
        p = subprocess.run([exe or ARGS.exe] + argv, cwd=cwd, env=env, capture_output=True, text=True,
                           timeout=timeout, input=stdin_text if stdin_text is not None else "")
    except subprocess.TimeoutExpired as e:
        def text(b):
            return b.decode(errors="replace") if isinstance(b, bytes) else (b or "")
        return -1, text(e.stdout) + text(e.stderr) + "\n(timed out after %d s)" % timeout
    return p.returncode, p.stdout + p.stderr


def run_on_pty(argv, cwd, typed, timeout=60):
    """Runs the tool with a pseudo-terminal as its stdin (the confirmation is asked only on a terminal) and types
    `typed` once the prompt appears. Returns (exit code, everything written to stdout and stderr)."""
    env = dict(os.environ)
    env["LOADTRIM_LOCK_DIR"] = os.path.join(ARGS.workdir, "locks")
    env["LOADTRIM_DATA_DIR"] = os.path.join(ARGS.workdir, "data")
    master, slave = pty.openpty()
    p = subprocess.Popen([ARGS.exe] + argv, cwd=cwd, env=env, stdin=slave, stdout=subprocess.PIPE,
                         stderr=subprocess.STDOUT)
    os.close(slave)
    out = b""
    deadline = time.monotonic() + timeout
    sent = False
    while time.monotonic() < deadline:
        r, _, _ = select.select([p.stdout], [], [], 0.2)
        if r:
            chunk = os.read(p.stdout.fileno(), 65536)
            if not chunk:
                break
            out += chunk
        if not sent and b"Type YES" in out:
            os.write(master, typed.encode() + b"\n")
            sent = True
        if p.poll() is not None and not r:
            break
    if p.poll() is None:
        p.kill()
    rc = p.wait(timeout=10)
    out += p.stdout.read() or b""
    os.close(master)
    return rc, out.decode(errors="replace")


def check(name, rc, out, want_rc, words, forbidden=(), source=""):
    """One row: the exit code and every word expected; nothing forbidden."""
    problems = []
    if rc != want_rc:
        problems.append("exit code %d, expected %d" % (rc, want_rc))
    for w in words:
        if w not in out:
            problems.append("missing %r" % w)
    for w in forbidden:
        if w in out:
            problems.append("must not say %r" % w)
    status = "ok" if not problems else "FAIL"
    print("%-4s %-44s exit %d  (%s)" % (status, name, rc, source))
    if problems:
        FAILED.append(name)
        print("     " + "; ".join(problems))
        print("     output:\n" + "\n".join("       " + l for l in out.splitlines()[-40:]))


def free_port():
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()  # nothing listens there now
    return port


def start_sim(truth):
    p = subprocess.Popen([ARGS.sim, "--truth", truth, "--port", "0", "--time-scale", "200"], stdout=subprocess.PIPE,
                         stderr=subprocess.STDOUT, text=True)
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline:
        line = p.stdout.readline()
        if not line:
            break
        # "loadtrim-sim listening tcp 127.0.0.1:PORT pid=N"
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


def main():
    global ARGS
    ap = argparse.ArgumentParser()
    ap.add_argument("--exe", required=True)
    ap.add_argument("--sim", required=True)
    ap.add_argument("--src", required=True)
    ap.add_argument("--workdir", required=True)
    ARGS = ap.parse_args()
    ARGS.exe = os.path.abspath(ARGS.exe)
    ARGS.sim = os.path.abspath(ARGS.sim)
    ARGS.src = os.path.abspath(ARGS.src)
    ARGS.workdir = os.path.abspath(ARGS.workdir)
    shutil.rmtree(ARGS.workdir, ignore_errors=True)
    os.makedirs(ARGS.workdir)
    w = ARGS.workdir
    src = ARGS.src
    cell = os.path.join(src, "config/cells/sim-tcp.toml")
    target = os.path.join(src, "samples/targets/demo-hatchback.toml")
    run_args = ["--override-checks", "mistakes test", "--operator", "tester"]

    # 1. "yes" at "Type YES": what was expected, and that nothing was done; exit 2 (refused). Nothing connects
    # (the cell's port is a closed one, so a connect attempt would show as a fault instead).
    closed = free_port()
    for typed in ("yes", "Yes please", ""):
        rc, out = run_on_pty(["run", "--cell", cell, "--target", target, "--port", str(closed)] + run_args, w,
                             typed)
        check("confirmation %r refused" % typed, rc, out, 2,
              ["the confirmation is exactly YES", "nothing was done", "the rollers were not moved"],
              ["session folder:", "connect"], "README, Exit codes: 2 no confirmation was given")

    # 2. README step 3 from a fresh clone: --out into a folder that does not exist yet creates it, then writes.
    fresh = os.path.join(w, "fresh-clone")
    os.makedirs(fresh)
    rc, out = run(["target", "--us", "30", "0.2", "0.02", "--id", "T1", "--test-mass-lb", "3500",
                   "--mass-in-running-order-kg", "1500", "--out", "targets/T1.toml"], fresh)
    check("target --out into a missing folder", rc, out, 0, ["written: targets/T1.toml (read back: identical)"],
          [], "README, The operator's day, step 3")
    if not os.path.isfile(os.path.join(fresh, "targets/T1.toml")):
        FAILED.append("target file not written")
        print("FAIL target file targets/T1.toml not written")
    # The README's step 4 then takes that file as it is (the inputs are checked before anything connects).
    rc, out = run(["run", "--cell", cell, "--target", "targets/T1.toml", "--port", str(closed), "--unattended"] +
                  run_args, fresh)
    check("README step 4 reads the step-3 file", rc, out, 3, ["the controller was never reached"],
          ["targets/T1.toml: error"], "README, step 4; exit 3: nothing listens on the port")

    # README step 1, as written, from the source tree (read-only there; the data root is the scratch one): exit 1
    # while a required check is due (README, Exit codes: 1 "`check due`: a required check is due").
    rc, out = run(["check", "due", "--cell", "config/cells/sim-tcp.toml"], src)
    check("README step 1: check due", rc, out, 1, ["dyno checks for cell sim-cell-tcp", "due (never passed)"], [],
          "README, The operator's day, step 1")

    # 3. target --from FILE with options the file overrides: refused, naming each option that would be ignored.
    for extra, named in ((["--id", "OTHER"], ["--id"]), (["--test-mass-kg", "1500"], ["--test-mass-kg"]),
                         (["--max-speed-kmh", "150"], ["--max-speed-kmh"]),
                         (["--id", "X", "--test-mass-kg", "1500", "--max-speed-kmh", "150"],
                          ["--id", "--test-mass-kg", "--max-speed-kmh"])):
        rc, out = run(["target", "--from", target] + extra, w)
        check("target --from with " + " ".join(named), rc, out, 2,
              named + ["would be ignored", "refused: nothing was started"], [], "README, Exit codes: 2")
    rc, out = run(["target", "--from", target], w)
    check("target --from alone", rc, out, 0, ["vehicle DEMO-HB-01"], ["would be ignored"], "README, step 3")
    # The file's profile is the one used, as `run` uses it (unless --profile gives another, as for `run`): a
    # [target_us] file of the US profile is tabled at that profile's speeds and written for it (header and body
    # alike).
    with open(target) as f:
        demo_text = f.read()
    us_file = os.path.join(w, "us-target.toml")
    with open(us_file, "w") as f:
        f.write('profile = "us-iterative"\n\n[vehicle]\nid = "US-1"\ntest_mass_kg = 1700.0\n'
                'mass_in_running_order_kg = 1600.0\ndrive = "front"\nmax_speed_kmh = 180.0\n\n'
                '[target_us]\na_lbf = 30.0\nb_lbf_per_mph = 0.3\nc_lbf_per_mph2 = 0.02\n')
    rc, out = run(["target", "--from", us_file, "--out", "us-out/US-1.toml"], w)
    check("target --from a us-iterative file", rc, out, 0,
          ["profile us-iterative)", "[band ±4.0 km/h]", "24.1", "written: us-out/US-1.toml"],
          ["profile wltp-iterative", "[band ±5.0 km/h]"], "README, step 3: --from takes the file's facts")
    written = open(os.path.join(w, "us-out/US-1.toml")).read() if rc == 0 else ""
    if "for profile us-iterative" not in written or 'profile = "us-iterative"' not in written:
        FAILED.append("target --from a us-iterative file: written header and body")
        print("FAIL target --from a us-iterative file wrote:\n" + written)
    rc, out = run(["target", "--from", us_file, "--profile", "wltp-fixed-run", "--out", "us-out/US-1-fixed.toml"], w)
    check("target --from with --profile", rc, out, 0, ["profile wltp-fixed-run)", "[band ±5.0 km/h]"],
          ["profile us-iterative", "[band ±4.0 km/h]"], "README, step 3: --profile, as for run")
    written = open(os.path.join(w, "us-out/US-1-fixed.toml")).read() if rc == 0 else ""
    if "for profile wltp-fixed-run" not in written or 'profile = "wltp-fixed-run"' not in written:
        FAILED.append("target --from with --profile: written header and body")
        print("FAIL target --from with --profile wrote:\n" + written)
    # A misspelt profile name: refused as `run` refuses it (exit 2), naming the file, the key and its line, and
    # the names allowed; nothing written. The brief's rule: bad input names the file, line/key and allowed range.
    misspelt = os.path.join(w, "misspelt-profile.toml")
    with open(misspelt, "w") as f:
        f.write(demo_text.replace('profile = "wltp-iterative"', 'profile = "wltp-iterativ"'))
    profile_words = ["misspelt-profile.toml: error: profile (line 3)", '"wltp-iterativ"', "allowed",
                     '"us-iterative", "wltp-fixed-run", "wltp-iterative"']
    rc, out = run(["target", "--from", misspelt, "--out", "misspelt-out.toml"], w)
    check("target --from a misspelt profile", rc, out, 2, profile_words, ["written:", "read back"],
          "README, Exit codes: 2; the brief's rule: file, line/key, allowed")
    if os.path.exists(os.path.join(w, "misspelt-out.toml")):
        FAILED.append("target --from a misspelt profile wrote --out")
        print("FAIL target --from a misspelt profile wrote misspelt-out.toml")
    rc, out = run(["run", "--cell", cell, "--target", misspelt, "--port", str(closed), "--unattended"] + run_args, w)
    check("run with a misspelt profile", rc, out, 2, profile_words + ["refused: nothing was started"], [],
          "README, Exit codes: 2")
    # An unknown key (a typo): warned as `run` warns, with its line; the target itself is accepted.
    typo = os.path.join(w, "typo-key.toml")
    with open(typo, "w") as f:
        f.write(demo_text.replace("max_speed_kmh = 185.0", "max_speed_kmh = 185.0\ncycle_max_speed_khm = 100.0"))
    typo_words = ["typo-key.toml: warning: vehicle.cycle_max_speed_khm (line 12): unknown key, ignored (a typo?)"]
    rc, out = run(["target", "--from", typo], w)
    check("target --from with an unknown key", rc, out, 0, typo_words + ["vehicle DEMO-HB-01"], [],
          "the brief's rule: never a silent default; run warns the same")
    rc, out = run(["run", "--cell", cell, "--target", typo, "--port", str(closed), "--unattended"] + run_args, w)
    check("run with the same unknown key", rc, out, 3, typo_words, [], "README, Exit codes: 3 nothing listens")

    # 4. A bad cell file and a bad target file together: both files' errors.
    bad_cell = os.path.join(w, "bad-cell.toml")
    with open(cell) as f:
        text = f.read()
    with open(bad_cell, "w") as f:
        f.write(text.replace("max_speed_kmh = 160.0", "max_speed_kmh = -5.0"))
    bad_target = os.path.join(src, "tests/data/bad/bad-target.toml")
    rc, out = run(["run", "--cell", bad_cell, "--target", bad_target, "--unattended"] + run_args, w)
    check("bad cell and bad target together", rc, out, 2,
          ["bad-cell.toml: error", "limits.max_speed_kmh", "bad-target.toml: error", "vehicle.test_mass_kg",
           "refused: nothing was started"], [], "README, Exit codes: 2 (every problem listed)")

    # 5. An unknown option names itself and the nearest; an unknown command suggests the nearest.
    rc, out = run(["run", "--cel", "x"], w)
    check("run --cel x", rc, out, 2, ["unknown option --cel", "did you mean --cell?"], ["--cell is required"],
          "README, Exit codes: 2")
    rc, out = run(["run", "--cell", cell, "--traget", target], w)
    check("run --traget", rc, out, 2, ["unknown option --traget", "did you mean --target?"], [],
          "README, Exit codes: 2")
    rc, out = run(["rn"], w)
    check("loadtrim rn", rc, out, 2, ['unknown command "rn"', 'did you mean "run"?'], [], "README, Exit codes: 2")
    rc, out = run(["reprot", "x"], w)
    check("loadtrim reprot", rc, out, 2, ['unknown command "reprot"', 'did you mean "report"?'], [],
          "README, Exit codes: 2")

    # 6. resume / report on a missing folder: bad input (2) with the path named, not a record failure (5).
    missing = os.path.join(w, "no-such-session")
    rc, out = run(["resume", missing, "--unattended"], w)
    check("resume on a missing folder", rc, out, 2, [missing, "no such session folder"], [],
          "README, Exit codes: 2 bad input; 5 is a record that could not be written")
    rc, out = run(["report", missing], w)
    check("report on a missing folder", rc, out, 2, [missing, "no such folder"], [], "README, Exit codes: 2")

    # 7. A failed connect: exit 3, no session folder left behind, and no claim that a watchdog stops rollers
    # nothing ever moved.
    sessions = os.path.join(w, "connect-sessions")
    rc, out = run(["run", "--cell", cell, "--target", target, "--port", str(closed), "--unattended", "--sessions",
                   sessions] + run_args, w)
    check("failed connect", rc, out, 3,
          ["could not connect to the controller", "nothing was moved", "no session folder was kept"],
          ["watchdog", '{"'], "README, Exit codes: 3 controller or link fault")
    left = os.listdir(sessions) if os.path.isdir(sessions) else []
    if left:
        FAILED.append("failed connect left a folder")
        print("FAIL failed connect left session folder(s): %s" % left)

    # 8. link-check with a controller that does not match the cell file: the code `run` gives the same mismatch.
    sim, port = start_sim(os.path.join(src, "samples/truths/demo-hatchback.toml"))
    try:
        wrong = os.path.join(w, "wrong-diameter.toml")
        with open(wrong, "w") as f:
            f.write(text.replace("roller_diameter_m = 1.2192", "roller_diameter_m = 0.5"))
        rc_run, out_run = run(["run", "--cell", wrong, "--target", target, "--port", str(port), "--unattended",
                               "--sessions", os.path.join(w, "mismatch-sessions")] + run_args, w, timeout=120)
        check("run with a mismatching controller", rc_run, out_run, 2, ["does not match the cell file"], [],
              "README, Exit codes: 2 the controller does not match the cell file")
        rc, out = run(["link-check", "--cell", wrong, "--port", str(port), "--seconds", "0.5"], w, timeout=120)
        check("link-check with the same mismatch", rc, out, rc_run,
              ["roller_diameter_m", "does not match the cell file"], [], "README, Exit codes: 2, as run")
        rc, out = run(["link-check", "--cell", cell, "--port", str(port), "--seconds", "0.5"], w, timeout=120)
        check("link-check with a matching controller", rc, out, 0, ["link-check passed"], [], "README, link-check")
    finally:
        sim.kill()
        sim.wait()

    # 9. `report` on a folder that is not a session folder touches nothing there: exit 2, naming the folder and
    # what is missing; the operator's files of the derived files' names stay as they were. A folder whose
    # events.jsonl cannot be read (here a folder by that name) is refused too, and nothing in it is removed.
    derived = ("report.html", "report.pdf", "coefficients.csv", "deviations.csv")
    cases = (("no events.jsonl", None, 2, ["is not a session folder", "it has no events.jsonl"]),
             ("another program's events.jsonl", '{"event":"door opened"}\n', 2,
              ["is not a session folder", "holds no loadtrim record"]),
             ("a dyno check's folder", '{"prev":"%s","seq":0,"type":"check_started","utc":"x"}\n' % ("0" * 64), 2,
              ["is not a session folder", "a dyno check's log"]),
             ("an unreadable events.jsonl", "dir", 5, ["no readable events.jsonl", "nothing was removed"]))
    for k, (what, log, want_rc, words) in enumerate(cases):
        mine = os.path.join(w, "operator-files-%d" % k)
        os.makedirs(mine)
        for name in derived:
            with open(os.path.join(mine, name), "w") as f:
                f.write("mine\n")
        if log == "dir":
            os.makedirs(os.path.join(mine, "events.jsonl"))
        elif log is not None:
            with open(os.path.join(mine, "events.jsonl"), "w") as f:
                f.write(log)
        rc, out = run(["report", mine], w)
        check("report on a folder with " + what, rc, out, want_rc, [mine] + words,
              ["if any, was removed", "if any, were removed"],
              ("README, Exit codes: 2 `report` on a folder that is not a session folder" if want_rc == 2 else
               "README, Exit codes: 5 `report` on a session folder whose events.jsonl cannot be read") +
              "; docs/records.md, \"The folder\": nothing else in it is removed")
        for name in derived:
            path = os.path.join(mine, name)
            if not os.path.isfile(path) or open(path).read() != "mine\n":
                FAILED.append("report on a folder with %s: %s" % (what, name))
                print("FAIL report on a folder with %s changed or removed %s" % (what, name))

    # 10. target --out: a refused target (exit 2) leaves the file already there as it was, and the message names
    # the option typed with its range in the units typed, not only the written file's metric key.
    good = ["target", "--id", "T9", "--test-mass-lb", "3500", "--mass-in-running-order-kg", "1500", "--out",
            "r1/T9.toml"]
    rc, out = run(["target", "--us", "30", "0.5", "0.02"] + good[1:], w)
    check("target --out, accepted", rc, out, 0, ["written: r1/T9.toml (read back: identical)"], [],
          "README, The operator's day, step 3")
    before = open(os.path.join(w, "r1/T9.toml"), "rb").read()
    for coefficients, words in ((["--us", "nan", "0.5", "0.02"],
                                 ["--us A: is nan, must be a finite number, allowed -1124.04 to 1124.04 lbf"]),
                                (["--us", "30", "inf", "0.02"],
                                 ["--us B: is inf, must be a finite number, allowed -18.0897 to 18.0897 lbf/mph"]),
                                (["--metric", "100", "0.5", "7"], ["--metric f2: is 7, allowed -1 to 1 N/(km/h)²"]),
                                (["--us", "30", "0.5", "-0.02"],
                                 ["--us C: is -0.02, must be positive (allowed 0 to 0.11645 lbf/mph²)",
                                  "not written", "r1/T9.toml is left as it was"]),
                                # US coefficients: the option typed and its range in US units, the metric
                                # range converted exactly (NIST SP 811) and rounded inward; never the metric
                                # key or unit.
                                (["--us", "30", "0.5", "0.2"], ["--us C: is 0.2, allowed 0 to 0.11645 lbf/mph²"]),
                                (["--us", "-5", "0.5", "0.02"],
                                 ["--us A: is -5, must not be negative (allowed 0 to 1124.04 lbf)"]),
                                (["--us", "1150", "0.5", "0.02"], ["--us A: is 1150, allowed -1124.04 to 1124.04 lbf"]),
                                (["--us", "30", "19", "0.02"], ["--us B: is 19, allowed -18.0897 to 18.0897 lbf/mph"])):
        rc, out = run(["target"] + coefficients + good[1:], w)
        check("target --out refused: " + " ".join(coefficients), rc, out, 2, words,
              ["T9.toml: error", "written: r1/T9.toml"] +
              (["target.f"] if coefficients[0] == "--us" else []),
              "README, Exit codes: 2; step 3")
        if open(os.path.join(w, "r1/T9.toml"), "rb").read() != before:
            FAILED.append("target --out refused changed the file: " + " ".join(coefficients))
            print("FAIL target --out refused (%s) changed r1/T9.toml" % " ".join(coefficients))

    # 11. NaN and inf given to a floating option: exit 2 and the option named with its range, before anything
    # starts (CLI11's range check alone lets NaN through). One row per floating option of loadtrim and
    # loadtrim-sim; the simulator's options with no range of their own must be finite numbers.
    truth = os.path.join(src, "samples/truths/demo-hatchback.toml")
    scratch = os.path.join(w, "nan-sessions")
    target_base = ["target", "--us", "30", "0.5", "0.02", "--id", "T", "--mass-in-running-order-kg", "1500"]
    rows = [
        (None, ["demo", "--in-process", "--no-live", "--sessions", scratch], "--time-scale", "1 to 2000"),
        (None, ["link-check", "--cell", cell, "--port", str(closed)], "--seconds", "0.1 to 600 s"),
        (None, ["link-check", "--cell", cell, "--port", str(closed)], "--rate-hz", "10 to 1000 Hz"),
        (None, ["run", "--cell", cell, "--target", target, "--port", str(closed)] + run_args, "--max-pause-s",
         "10 to 86400 s"),
        (None, ["run", "--cell", cell, "--target", target, "--port", str(closed)] + run_args, "--rewarm-s",
         "0 to 14400 s"),
        (None, ["resume", missing, "--unattended"], "--rewarm-s", "0 to 14400 s"),
        (None, ["bench", "--vehicles", "2"], "--rate-hz", "10 to 1000 Hz"),
        (None, ["bench", "--vehicles", "2"], "--hold-bias-sd-n", "0 to 50 N"),
        (None, ["bench", "--vehicles", "2"], "--compare-rates-hz", "10 to 1000 Hz"),
        (None, target_base, "--test-mass-kg", "50 to 20000 kg"),
        (None, target_base, "--test-mass-lb", "110.231 to 44092.5 lb"),
        (None, target_base[:-2] + ["--test-mass-kg", "1500"], "--mass-in-running-order-kg", "25 to 20000 kg"),
        (None, target_base + ["--test-mass-kg", "1500"], "--rotating-mass-kg", "0 to 4000 kg"),
        (None, target_base + ["--test-mass-kg", "1500"], "--max-speed-kmh", "30 to 400 km/h"),
        (None, target_base + ["--test-mass-kg", "1500"], "--cycle-max-speed-kmh", "10 to 400 km/h"),
        (None, ["overview", "--format", "text"], "--stale-after-h", "0.1 to 720 h"),
    ]
    for option, allowed in (("--time-scale", "0.01 to 10000"), ("--watchdog-ms", "50 to 600000 ms"),
                            ("--initial-warmth", "0 to 1"), ("--modbus-clock-offset-s", "0 to 1e+15 s"),
                            ("--force-loop-gain", "0.5 to 1.5"), ("--force-loop-time-constant-s", "0 to 2 s"),
                            ("--force-loop-damping", "0.05 to 5"), ("--friction-compensation-error", "-1 to 1"),
                            ("--driver-max-power-w", "500 to 2e+06 W"), ("--driver-early-release", "0 to 1"),
                            ("--driver-max-force-n", "50 to 50000 N"), ("--driver-late-release", "0 to 1"),
                            ("--max-speed-kmh", None), ("--exit-after-s", None), ("--drop-at-s", None),
                            ("--drop-after-s", None), ("--stall-at-s", None), ("--delay-replies-ms", None),
                            ("--estop-at-s", None), ("--report-roller-diameter-m", None),
                            ("--report-base-inertia-kg", None)):
        # A simulator that started anyway exits by itself (--exit-after-s) or at the row's time limit.
        net = [] if option == "--exit-after-s" else ["--exit-after-s", "10"]
        rows.append((ARGS.sim, ["--truth", truth, "--port", "0"] + net, option, allowed))
    for exe, argv, option, allowed in rows:
        for value in ("nan", "inf", "-inf"):
            if value == "-inf" and option not in ("--max-speed-kmh", "--rewarm-s", "--friction-compensation-error"):
                continue
            said = option + ": is " + value + ", must be a finite number" + (", allowed " + allowed if allowed else "")
            rc, out = run(argv + [option, value], w, timeout=20, exe=exe)
            check("%s %s %s" % ("loadtrim-sim" if exe else argv[0], option, value), rc, out, 2, [said],
                  ["internal error", "bench-cell.toml", "real time", "Type YES", "listening"],
                  "README, Exit codes: 2 an option refused before anything moved")

    # 12. --first-setting history without a store, twice in one data root (docs/store.md, "The history first
    # setting", 1: with no store the per-cell history file is read): the first session finds none and says on the
    # console that it fell back and why; the second finds the first's accepted setting on this cell and uses it.
    # (The history was once saved under an empty cell name and never found again.) Both simulated cells: the
    # in-process one, and the TCP one against loadtrim-sim.
    sim, port = start_sim(os.path.join(src, "samples/truths/demo-hatchback.toml"))
    try:
        for cell_file, extra in (("sim-inprocess.toml", []), ("sim-tcp.toml", ["--port", str(port)])):
            root = os.path.join(w, "history-" + cell_file.replace(".toml", ""))
            argv = ["run", "--cell", os.path.join(src, "config/cells", cell_file), "--target", target,
                    "--unattended", "--first-setting", "history", "--data-dir", root] + extra + run_args
            said = []
            for k in (1, 2):
                rc, out = run(argv, w, timeout=120)
                said.append(out)
                words = (["first setting (fleet)", "first setting: fleet used, history asked for",
                          "no earlier accepted session of this vehicle", "the history file was read: no entry there"]
                         if k == 1 else ["first setting (history)"])
                check("history first setting, %s session %d" % (cell_file, k), rc, out, 0, words,
                      ["first setting (fleet)"] if k == 2 else [],
                      "docs/store.md, The history first setting, 1; README, Exit codes: 0")
            # The second session's first_setting record names history, and the history file it read is where the
            # first session saved (the cell's own folder, not one for an empty name).
            sessions = sorted(os.listdir(os.path.join(root, "sessions")))
            records = []
            for name in sessions:
                with open(os.path.join(root, "sessions", name, "events.jsonl")) as f:
                    records += [r for r in map(json.loads, f) if r.get("type") == "first_setting"]
            strategies = [(r.get("requested"), r.get("strategy")) for r in records]
            saved = sorted(os.listdir(os.path.join(root, "history")))
            ok = (strategies == [("history", "fleet"), ("history", "history")] and len(saved) == 1 and
                  not saved[0].startswith("unnamed") and
                  os.path.isfile(records[-1].get("history_lookup", {}).get("file", "")))
            print("%-4s %-44s (%s)" % ("ok" if ok else "FAIL", "history first setting, %s records" % cell_file,
                                       "docs/store.md, The history first setting"))
            if not ok:
                FAILED.append("history first setting, %s records" % cell_file)
                print("     first_setting records (requested, strategy): %s; history folders: %s" % (strategies,
                                                                                                      saved))
    finally:
        sim.kill()
        sim.wait()

    # 13. EPA CSV rows (target --epa, demo --epa): a row that cannot be used says why, naming the CSV, the line,
    # the column, the value and what is allowed, and nothing is tabled before the row is known good; a drive code
    # that is empty or not one of the list is never taken for all-wheel drive (the brief's rule: bad input names
    # the file, line/key and allowed range; never a silent default; README, Exit codes: 2).
    with open(os.path.join(src, "samples/data/epa_test_car_roadload_MY2016_2019.csv")) as f:
        epa = [f.readline().rstrip("\n") for _ in range(9)]
    header = epa[0].split(",")

    def with_cell(line_no, column, value):
        cells = epa[line_no - 1].split(",")
        cells[header.index(column)] = value
        return ",".join(cells)

    rows = list(epa)
    rows[2] = with_cell(3, "drive_system_code", "")
    rows[3] = with_cell(4, "drive_system_code", "f")
    rows[4] = with_cell(5, "etw_kg", epa[4].split(",")[header.index("etw_kg")] + " ")
    rows[5] = ",".join(epa[5].split(",")[:5])
    rows[6] = with_cell(7, "etw_kg", "-5")
    rows[7] = with_cell(8, "etw_kg", "12x")
    rows[8] = with_cell(9, "etw_kg", "80")
    bad_csv = os.path.join(w, "bad-rows.csv")
    with open(bad_csv, "w") as f:
        f.write("\n".join(rows) + "\n")
    codes = 'allowed "F" (2WD front), "R" (2WD rear), "A" (AWD), "4" (4WD), "P" (part-time 4WD)'
    table = ["target (exact)", "masses:", "initial dyno setting"]
    for line_no, rc_want, words in (
            (3, 2, ["bad-rows.csv: error: line 3, column drive_system_code: is empty, " + codes]),
            (4, 2, ['bad-rows.csv: error: line 4, column drive_system_code: is "f", ' + codes]),
            (6, 2, ["bad-rows.csv: error: line 6, column drive_system_code: is missing: the row has 5 cells, "
                    "the header 24"]),
            (7, 2, ["bad-rows.csv: error: line 7, column etw_kg", "is -5, allowed 125 to 20000 kg"]),
            # Lighter than the 100 kg the mass in running order is estimated below it, plus the lowest mass in
            # running order a target takes (25 kg): left out, not tabled with a negative mass.
            (9, 2, ["bad-rows.csv: error: line 9, column etw_kg: is 80, allowed 125 to 20000 kg",
                    "the mass in running order is estimated as the weight less 100 kg",
                    "the row cannot be used (--epa-line 9)"]),
            (8, 2, ['bad-rows.csv: error: line 8, column etw_kg: is "12x", not a number: allowed a finite number '
                    "in kg"]),
            (10, 2, ["bad-rows.csv: error: --epa-line: is 10: the file ends at line 9"]),
            (5, 0, ["from " + bad_csv + " line 5"] + table)):
        rc, out = run(["target", "--epa", bad_csv, "--epa-line", str(line_no), "--estimate-mass-in-running-order"],
                      w)
        check("target --epa line %d" % line_no, rc, out, rc_want, words,
              (table + ["TM -5.0 kg", "no usable row", "two-axle"]) if rc_want == 2 else ["error"],
              "the brief's rule: file, line/key, allowed range; README, Exit codes: 2" if rc_want == 2 else
              "README, step 3: a value with a space after it is the value")
    # The same row asked for by its id: it is there but cannot be used (before: "no row has the id").
    epa_id = "/".join(epa[3].split(",")[header.index(c)]
                      for c in ("model_year", "test_vehicle_id", "test_veh_config_num"))
    rc, out = run(["target", "--epa", bad_csv, "--epa-id", epa_id, "--estimate-mass-in-running-order"], w)
    check("target --epa-id of an unusable row", rc, out, 2,
          ['bad-rows.csv: error: line 4, column drive_system_code: is "f", ' + codes,
           "the row cannot be used (--epa-id " + epa_id + ")"], ["no row has the id"] + table,
          "the brief's rule: file, line/key, allowed range; README, Exit codes: 2")
    rc, out = run(["demo", "--epa", bad_csv, "--vehicles", "1", "--no-live", "--sessions",
                   os.path.join(w, "epa-demo-sessions")], w, timeout=120)
    check("demo --epa names the rows it cannot use", rc, out, 0,
          [bad_csv + ": line 3, column drive_system_code: is empty, " + codes + "; the row is not used",
           bad_csv + ': line 4, column drive_system_code: is "f"', bad_csv + ": line 6, column drive_system_code",
           bad_csv + ": line 8, column etw_kg", "1 of 1 vehicles accepted"], [],
          "the brief's rule: never a silent default")

    # 14. Options that pick or need another: both row choices at once, one without --epa, --epa without one
    # (target), and the demo's options that only one kind of demo uses; each refused (exit 2), naming them,
    # before anything runs (the brief's rule: never a silent default; README, Exit codes: 2).
    epa_demo = ["demo", "--no-live", "--sessions", os.path.join(w, "option-sessions")]
    for argv, words in (
            (["target", "--epa", bad_csv, "--epa-line", "5", "--epa-id", epa_id, "--estimate-mass-in-running-order"],
             ["--epa-line: and --epa-id both pick the CSV row (--epa-line 5, --epa-id " + epa_id + ")"]),
            (["target", "--from", target, "--epa-line", "5"],
             ["--epa-line: picks a row of the CSV that --epa names, and no --epa is given"]),
            (["target", "--from", target, "--epa-id", epa_id], ["--epa-id: picks a row of the CSV"]),
            (["target", "--epa", bad_csv, "--estimate-mass-in-running-order"],
             ["--epa: needs the row to take: give --epa-line N or --epa-id ID"]),
            (target_base + ["--test-mass-kg", "1500", "--estimate-mass-in-running-order"],
             ["--estimate-mass-in-running-order: accepts an estimate when no mass is given, and "
              "--mass-in-running-order-kg is given"]),
            # With --from both come from the file: every one given is named as ignored, not "drop one of them".
            (["target", "--from", target, "--mass-in-running-order-kg", "1500", "--estimate-mass-in-running-order"],
             ["--from: takes the vehicle's facts from the target file, so --mass-in-running-order-kg, "
              "--estimate-mass-in-running-order would be ignored"]),
            (epa_demo + ["--vehicles", "3"],
             ["--vehicles: draws the vehicles from the CSV that --epa names, and no --epa is given"]),
            (epa_demo + ["--seed", "7"], ["--seed: draws the vehicles from the CSV that --epa names"]),
            (epa_demo + ["--in-process", "--time-scale", "50"],
             ["--time-scale: sets loadtrim-sim's time scale, and --in-process runs no loadtrim-sim"]),
            (epa_demo + ["--live-bind", "127.0.0.1:0"], ["--live-bind: sets where the live page listens, and --no-live"]),
            (epa_demo + ["--epa", bad_csv, "--target", target], ["--target: is not used with --epa"]),
            (epa_demo + ["--epa", bad_csv, "--truth", os.path.join(src, "samples/truths/demo-hatchback.toml")],
             ["--truth: is not used with --epa"]),
            (epa_demo + ["--epa", bad_csv, "--time-scale", "50"], ["--time-scale: is not used with --epa"])):
        rc, out = run(argv, w, timeout=30)
        check(" ".join([argv[0]] + [a for a in argv[1:] if a.startswith("--") and a not in ("--no-live", "--sessions")]),
              rc, out, 2, words + ["refused: nothing was started"],
              ["target (exact)", "vehicles accepted", "simulated controller started", "session folder"],
              "the brief's rule: never a silent default; README, Exit codes: 2")

    print("\n%d row(s) failed" % len(FAILED) if FAILED else "\nevery row passed")
    return 1 if FAILED else 0


if __name__ == "__main__":
    sys.exit(main())
