#!/usr/bin/env python3
"""The sign-off report in a browser: three sessions against the simulated controller (an overridden one, a resumed
one, an accepted and approved one), each report rendered by headless Chromium (--dump-dom) and its page one searched
for every item of the sign-off list; each printed PDF page (pdftotext, Debian poppler-utils) carries the session id,
the result and a page number. Also the dyno-check report's header facts.

What each item is checked against is the session's own record (events.jsonl, summary.json) and the command line the
test gave, never the report's wording alone: the override reason and the operator are the test's, the decision
rule is the coast-down records', the 120 s rule's gap is the timing record's (EU SA4 §8.1.2-8.1.3, docs/standards.md
§3.6).

Usage: sign_off_report.py --exe build/bin/loadtrim --sim build/bin/loadtrim-sim --src SOURCE_DIR --workdir DIR
"""
import argparse, csv, glob, html.parser, json, os, re, shutil, signal, subprocess, sys, tempfile, time
import xml.etree.ElementTree as ET

failures, passes = [], []
ARGS = None
REASON = "inertia check booked for tomorrow; supervisor agreed"
OPERATOR = "J. Operator"
REVIEWER = "R. Reviewer"
STATEMENT = "reviewed; setting fit for use"


def check(cond, what):
    (passes if cond else failures).append(what)
    print("ok:" if cond else "FAIL:", what)


def env():
    e = dict(os.environ)
    e["LOADTRIM_LOCK_DIR"] = os.path.join(ARGS.workdir, "locks")
    e["LOADTRIM_DATA_DIR"] = os.path.join(ARGS.workdir, "data")
    return e


def tool(*argv, timeout=180):
    return subprocess.run([ARGS.exe] + list(argv), cwd=ARGS.workdir, env=env(), capture_output=True, text=True,
                          timeout=timeout)


def start_sim(*extra):
    p = subprocess.Popen([ARGS.sim, "--truth", os.path.join(ARGS.src, "samples/truths/demo-hatchback.toml"), "--port",
                          "0", "--time-scale", "100", "--watchdog-ms", "1000", "--exit-after-s", "300"] + list(extra),
                         stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline:
        m = re.search(r"listening.*127\.0\.0\.1:(\d+)", p.stdout.readline())
        if m:
            return p, int(m.group(1))
    p.kill()
    raise SystemExit("loadtrim-sim did not print its port")


def records(folder):
    return [json.loads(l) for l in open(os.path.join(folder, "events.jsonl"), encoding="utf-8") if l.strip()]


def records_so_far(folder):
    """The records a running session has written so far: none before its events.jsonl exists (the folder is made
    first), and a last line still being written is not yet a record."""
    try:
        with open(os.path.join(folder, "events.jsonl"), encoding="utf-8") as f:
            lines = f.read().split("\n")
    except FileNotFoundError:
        return []
    out = []
    for l in lines[:-1]:
        if l.strip():
            out.append(json.loads(l))
    return out


def only_folder(d):
    f = [x for x in glob.glob(d + "/2*") if os.path.isdir(x)]
    return f[0] if len(f) == 1 else None


class ById(html.parser.HTMLParser):
    """The text inside each element with an id (nested ones included), from Chromium's dumped DOM."""

    VOID = {"br", "meta", "img", "hr", "input", "link"}

    def __init__(self):
        super().__init__()
        self.stack, self.text = [], {}

    def handle_starttag(self, tag, attrs):
        if tag in self.VOID:
            return
        self.stack.append(dict(attrs).get("id"))
        if self.stack[-1]:
            self.text.setdefault(self.stack[-1], "")

    def handle_endtag(self, tag):
        if tag not in self.VOID and self.stack:
            self.stack.pop()

    def handle_data(self, data):
        for i in self.stack:
            if i:
                self.text[i] += data


def chromium(*args):
    exe = shutil.which("chromium")
    if not exe:
        return None
    prof = tempfile.mkdtemp(prefix="lt-chromium-")
    try:
        return subprocess.run([exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                               "--disable-background-networking", "--disable-component-update", "--disable-sync",
                               "--user-data-dir=" + prof] + list(args), capture_output=True, text=True, timeout=120)
    finally:
        shutil.rmtree(prof, ignore_errors=True)


def page_one(folder, name):
    """The ids on page one of the report as Chromium renders it (its DOM after parsing), and page one's text."""
    r = chromium("--dump-dom", "file://" + os.path.join(folder, "report.html"))
    check(r is not None and r.returncode == 0 and "<html" in r.stdout, "%s: headless Chromium rendered the report" % name)
    if r is None:
        return {}, ""
    p = ById()
    p.feed(r.stdout)
    return p.text, re.sub(r"\s+", " ", p.text.get("page-one", ""))


def pdf_pages(folder, name, session_id, result):
    r = tool("report", folder, "--pdf")
    pdf = os.path.join(folder, "report.pdf")
    check(r.returncode == 0 and os.path.exists(pdf), "%s: report --pdf printed report.pdf (%s)" % (name, r.stderr.strip()))
    if not shutil.which("pdftotext"):
        check(False, "%s: pdftotext (Debian poppler-utils, in .ci/setup's test packages) is installed" % name)
        return []
    t = subprocess.run(["pdftotext", "-layout", pdf, "-"], capture_output=True, text=True).stdout
    pages = [re.sub(r"\s+", " ", p) for p in t.split("\f") if p.strip()]
    check(len(pages) >= 2, "%s: the PDF has %d pages" % (name, len(pages)))
    for i, p in enumerate(pages, 1):
        check(("Session " + session_id) in p and ("Result: " + result) in p and ("page %d of %d" % (i, len(pages))) in p,
              "%s: printed page %d carries the session id, the result and 'page %d of %d'" % (name, i, i, len(pages)))
    return pages


def common_items(name, folder, ids, text, pages, expect_result):
    """The sign-off list's items every report has on page one, each against the record."""
    recs = records(folder)
    session_id = os.path.basename(folder)
    fin = [r for r in recs if r["type"] == "finished"][-1]
    check(fin["result"] == expect_result and fin["result"] in ("accepted", "not-accepted"),
          "%s: the session's result is a verdict (%s)" % (name, fin["result"]))
    check(session_id in ids.get("session-id", ""), "%s: page one names the session id" % name)
    check(("Result: " + fin["result"]) in ids.get("result", ""), "%s: page one states the recorded result" % name)
    # The decision rule, as the coast-down records name it (docs/standards.md §3.11).
    rules = {r["check"].get("decision_rule", "simple") for r in recs if r["type"] == "coastdown" and r.get("usable")}
    words = {"simple": "simple acceptance", "guard-band": "guard band"}
    check(len(rules) == 1 and words[rules.pop()] in ids.get("decision-rule", ""),
          "%s: page one states the recorded decision rule" % name)
    # The 120 s rule: each release timing record's gap, as the report rounds it (0.1 s).
    timing = [r for r in recs if r["type"] in ("timing", "timing_rule_missed") and "within" in r]
    check(len(timing) >= 1, "%s: the record holds a release timing" % name)
    for t in timing:
        gap = "%.1f s after the warm-up's end" % t["gap_s"]
        check(gap in ids.get("findings", "") and ("met" if t["within"] else "MISSED") in ids.get("findings", ""),
              "%s: page one's findings state the 120 s rule's gap %s" % (name, gap))
    check(("Rollers confirmed stopped" if fin["rollers_stopped"] else "ROLLERS NOT CONFIRMED STOPPED")
          in ids.get("findings", ""), "%s: page one states whether the rollers were confirmed stopped" % name)
    check("Warm-up drift at acceptance" in ids.get("findings", "") and "Run-up speed" in ids.get("findings", ""),
          "%s: page one states the warm-up drift at acceptance and the run-up speed" % name)
    check("Dyno-check gate" in text and ids.get("check-gate", "").strip() != "",
          "%s: page one states the dyno-check gate" % name)
    check(OPERATOR in ids.get("operated-by", ""), "%s: page one's sign-off names the operator (%s)" % (name, OPERATOR))
    for k in ("session-id", "result", "decision-rule", "check-gate", "findings", "sign-off"):
        check(k in ids and ids[k].strip() and re.sub(r"\s+", " ", ids[k]).strip()[:40] in text,
              "%s: '%s' is inside page one" % (name, k))
    # Page one is the first printed page: its items are on it.
    if pages:
        check(all(w in pages[0] for w in ("Decision rule", "Dyno-check gate", "Safety and timing findings", "Sign-off",
                                          "Operated by", OPERATOR)),
              "%s: the sign-off list is on the first printed page" % name)
        check("Cell and controller" not in pages[0], "%s: page one ends before the facts" % name)
    # The worst-deviation chart: whole-number ticks on the coast-down axis; the tolerance line strictly inside the
    # frame (it sat on the frame when every coast-down was within the tolerance).
    rep = open(os.path.join(folder, "report.html"), encoding="utf-8").read()
    svg = [x for x in re.findall(r"<svg.*?</svg>", rep, re.S) if 'id="plot-convergence"' in x]
    if svg:
        root = ET.fromstring(svg[0])
        NS = "{http://www.w3.org/2000/svg}"
        fr = [e for e in root.iter(NS + "rect") if e.get("class") == "frame"][0]
        top, bottom = float(fr.get("y")), float(fr.get("y")) + float(fr.get("height"))
        line = [e for e in root.iter(NS + "polyline") if e.get("class") == "tolerance"]
        ys = [float(p.split(",")[1]) for p in line[0].get("points").split()] if line else []
        ticks = [t.text for t in root.iter(NS + "text") if t.get("class") == "tick-x"]
        check(ys and all(top + 1 < y < bottom - 1 for y in ys) and all(re.fullmatch(r"-?\d+", t) for t in ticks),
              "%s: worst-deviation chart: tolerance line inside the frame, whole-number ticks %s" % (name, ticks))
    else:
        check(False, "%s: the report has the worst-deviation chart" % name)
    # The facts after page one: cell and controller, estimators, warm-up.
    ctrl = [r for r in recs if r["type"] == "controller"][0]
    check(("%.4f m" % ctrl["roller_diameter_m"]) in ids.get("cell-controller", ""),
          "%s: the roller diameter the controller stated is in the report" % name)
    inertia = [r for r in recs if r["type"] == "inertia"][0]
    check(("%.1f kg" % inertia["inertia_kg"]) in ids.get("cell-controller", "") and "matches" in ids.get("cell-controller", ""),
          "%s: the inertia set and its read-back are in the report" % name)
    for r in recs:
        if r["type"] == "coastdown" and r.get("usable"):
            check(("%.2f" % r["estimator_disagreement_n"]) in ids.get("estimators", ""),
                  "%s: coast-down %d's estimator difference is in the report" % (name, r["run"]))


def signed_cell(port_cell, name):
    """A copy of the TCP cell file with a signing key (so that a reviewer may approve) and the dyno-check gate off."""
    path = os.path.join(ARGS.workdir, name)
    r = tool("keys", "create", "--cell", "sim-cell-tcp (invented)")
    fp = re.search(r"fingerprint: (sha256:[0-9a-f]+)", r.stdout)
    if not fp:
        raise SystemExit("keys create --cell: no fingerprint\n" + r.stdout + r.stderr)
    text = open(port_cell).read() + '\n[records]\npublic_key = "%s"\n\n[checks]\nenforce = false\n' % fp.group(1)
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
    cell = os.path.join(ARGS.src, "config/cells/sim-tcp.toml")
    target = os.path.join(ARGS.src, "samples/targets/demo-hatchback.toml")
    profile = os.path.join(ARGS.src, "tests/data/wltp-iterative-short-warmup.toml")
    signed = signed_cell(cell, "cell-signed.toml")
    sim, port = start_sim()
    try:
        base = ["--target", target, "--profile", profile, "--port", str(port), "--unattended", "--quiet",
                "--operator", OPERATOR]
        # (a) Overridden: the cell enforces its dyno checks and its history is empty, so they are due; the operator
        # overrides with a reason.
        over_dir = os.path.join(ARGS.workdir, "overridden")
        r = tool("run", "--cell", cell, "--checks", os.path.join(ARGS.workdir, "empty-checks"), "--sessions", over_dir,
                 "--override-checks", REASON, *base)
        # A verdict either way (README, exit codes 0 and 1): the report states whichever the record holds. On a
        # loaded host the simulator at 100x may miss a deadline and the session end not accepted; that is still a
        # report to sign off.
        check(r.returncode in (0, 1), "overridden: the session reached a verdict (exit %d) %s" % (r.returncode, r.stderr[-300:]))
        over = only_folder(over_dir)
        # (b) Resumed: Ctrl-C once the first coast-down is recorded, then `resume`.
        res_dir = os.path.join(ARGS.workdir, "resumed")
        p = subprocess.Popen([ARGS.exe, "run", "--cell", signed, "--sessions", res_dir] + base, cwd=ARGS.workdir,
                             env=env(), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and p.poll() is None:
            f = only_folder(res_dir)
            if f and any(x["type"] == "coastdown" for x in records_so_far(f)):
                p.send_signal(signal.SIGINT)
                break
            time.sleep(0.05)
        rc1 = p.wait(timeout=60)
        res = only_folder(res_dir)
        check(rc1 == 4, "resumed: the first run was interrupted (exit %d, README: 4)" % rc1)
        r = tool("resume", res, "--port", str(port), "--unattended", "--quiet", "--rewarm-s", "60", "--operator",
                 OPERATOR)
        check(r.returncode in (0, 1), "resumed: the resumed session reached a verdict (exit %d) %s" % (r.returncode, r.stderr[-300:]))
        # (c) Accepted, sealed with the cell's key and approved by a reviewer.
        acc_dir = os.path.join(ARGS.workdir, "accepted")
        r = tool("run", "--cell", signed, "--sessions", acc_dir, "--csv-decimal-comma", *base)
        check(r.returncode == 0, "accepted: the session was accepted (exit %d) %s" % (r.returncode, r.stderr[-300:]))
        acc = only_folder(acc_dir)
        # The session's own exports follow --csv-decimal-comma: read with csv.reader(';'), the final measured
        # coefficients equal summary.json's within the 4, 6 and 7 decimals written.
        if acc:
            with open(os.path.join(acc, "coefficients.csv"), newline="", encoding="utf-8") as f:
                rows = list(csv.reader(f, delimiter=";"))
            summary = json.load(open(os.path.join(acc, "summary.json")))
            last = [x for x in rows if x[1] == "measured"][-1]
            m = summary["measured"]
            check(rows[0][:5] == ["run", "what", "f0_n", "f1_n_per_kmh", "f2_n_per_kmh2"] and
                  abs(float(last[2].replace(",", ".")) - m["f0_n"]) <= 0.5e-4 and
                  abs(float(last[3].replace(",", ".")) - m["f1_n_per_kmh"]) <= 0.5e-6 and
                  abs(float(last[4].replace(",", ".")) - m["f2_n_per_kmh2"]) <= 0.5e-7,
                  "accepted: run --csv-decimal-comma wrote the session's coefficients.csv for a decimal comma")
        r = tool("keys", "create", "--reviewer", REVIEWER)
        key = glob.glob(os.path.join(ARGS.workdir, "data/keys/reviewer-*.key.pem"))
        r = tool("approve", acc, "--reviewer", REVIEWER, "--key", key[0] if key else "none", "--statement", STATEMENT)
        check(r.returncode == 0, "accepted: the reviewer's approval was recorded (exit %d) %s" % (r.returncode, r.stderr))
        r = tool("report", acc)
        check(r.returncode == 0, "accepted: the report was written again after the approval")
        # A dyno check's report: header facts and the chain stated once.
        chk_dir = os.path.join(ARGS.workdir, "checks")
        empty_sim, empty_port = start_sim("--empty-rollers")
        try:
            r = tool("check", "coastdown", "--cell", cell, "--port", str(empty_port), "--checks", chk_dir,
                     "--unattended", "--json", "--operator", OPERATOR,
                     "--profile", os.path.join(ARGS.src, "tests/data/checks-short.toml"))
        finally:
            empty_sim.kill()
            empty_sim.wait()
        check(r.returncode in (0, 1), "check: the unloaded coast-down check ran (exit %d) %s" % (r.returncode, r.stderr[-300:]))
        try:
            chk_folder = json.loads(r.stdout.splitlines()[0]).get("folder", "")
        except (ValueError, IndexError):
            chk_folder = ""
    finally:
        sim.kill()
        sim.wait()

    for name, folder in (("overridden", over), ("resumed", res), ("accepted", acc)):
        if not folder:
            check(False, "%s: one session folder" % name)
            continue
        result = [x for x in records(folder) if x["type"] == "finished"][-1]["result"]
        ids, text = page_one(folder, name)
        pages = pdf_pages(folder, name, os.path.basename(folder), result)
        common_items(name, folder, ids, text, pages, result)
        gate = re.sub(r"\s+", " ", ids.get("check-gate", ""))
        if name == "overridden":
            check("OVERRIDDEN" in gate and REASON in gate, "overridden: page one states the override and its reason")
            start = [x for x in records(folder) if x["type"] == "session_started"][0]
            check(start["dyno_checks"].get("overridden") is True, "overridden: the record holds the override")
            check("Signature" in ids.get("paper-sign-off", "") and "Date" in ids.get("paper-sign-off", ""),
                  "overridden: no approval, so page one has signature and date lines for a paper archive")
        if name == "resumed":
            n = sum(1 for x in records(folder) if x["type"] == "resume_started")
            check(n == 1 and "resume" in ids.get("resumed", "").lower(), "resumed: page one says it was resumed")
            check("at the start" in gate and "at resume 1" in gate and gate.count("exempt") == 2,
                  "resumed: page one states the gate at the start and at the resume")
            check("Interrupted by the operator" in ids.get("findings", ""),
                  "resumed: page one's findings state the interruption")
        if name == "accepted":
            check("exempt" in gate and "checks.enforce = false" in gate, "accepted: page one states the gate exempt, and why")
            ap = re.sub(r"\s+", " ", ids.get("approval", ""))
            check(REVIEWER in ap and STATEMENT in ap and "signature verified" in ap,
                  "accepted: page one shows the reviewer's approval, its signature verified")
            check("paper-sign-off" not in ids, "accepted: no empty signature lines when an approval is recorded")

    if chk_folder and os.path.exists(os.path.join(chk_folder, "report.html")):
        rep = open(os.path.join(chk_folder, "report.html"), encoding="utf-8").read()
        start = [x for x in records(chk_folder) if x["type"] == "check_started"][0]
        res = json.load(open(os.path.join(chk_folder, "result.json")))
        r = chromium("--dump-dom", "file://" + os.path.join(chk_folder, "report.html"))
        p = ById()
        p.feed(r.stdout if r else "")
        head = re.sub(r"\s+", " ", p.text.get("check-facts", ""))
        check(start["utc"][:19].replace("T", " ") in head, "check report: the date and time of the check")
        check(("loadtrim " + res.get("software", {}).get("version", "?")) in head,
              "check report: the software version recorded in result.json")
        check(OPERATOR in head and "sim-cell-tcp (invented)" in head, "check report: the operator and the cell")
        check(rep.count("chain intact") == 1, "check report: says 'chain intact' once (%d)" % rep.count("chain intact"))
    else:
        check(False, "check: the check's folder has a report.html")

    print("sign-off report checks: %d passed, %d failed" % (len(passes), len(failures)))
    sys.exit(1 if failures else 0)


if __name__ == "__main__":
    main()
