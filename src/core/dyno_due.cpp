// Which dyno check is due: the table of CFR 1066.215 (docs/standards.md §4.1), one row per check.
#include <algorithm>

#include "core/dyno_checks.hpp"
#include "core/problem.hpp"

namespace loadtrim::core {

const char* to_string(CheckKind k) {
  switch (k) {
    case CheckKind::parasitic:
      return "parasitic";
    case CheckKind::coastdown:
      return "coastdown";
    case CheckKind::readiness:
      return "readiness";
    case CheckKind::inertia:
      return "inertia";
    case CheckKind::friction:
      return "friction";
    case CheckKind::accel_decel:
      return "accel-decel";
    case CheckKind::response:
      return "response";
    case CheckKind::speed:
      return "speed";
    case CheckKind::linearity:
      return "linearity";
  }
  return "unknown";
}

bool parse(const std::string& s, CheckKind& out) {
  for (CheckKind k : kAllChecks)
    if (s == to_string(k)) {
      out = k;
      return true;
    }
  return false;
}

const char* clause_of(CheckKind k) {
  switch (k) {
    case CheckKind::parasitic:
      return "1066.255";
    case CheckKind::coastdown:
      return "1066.270";
    case CheckKind::readiness:
      return "1066.275";
    case CheckKind::inertia:
      return "1066.250";
    case CheckKind::friction:
      return "1066.260";
    case CheckKind::accel_decel:
      return "1066.265";
    case CheckKind::response:
      return "1066.245";
    case CheckKind::speed:
      return "1066.235";
    case CheckKind::linearity:
      return "1066.220";
  }
  return "";
}

bool runs_in_loadtrim(CheckKind k) {
  return k != CheckKind::speed && k != CheckKind::linearity;
}

const DueRule* DuePolicy::find(CheckKind k) const {
  for (const auto& r : rules)
    if (r.kind == k) return &r;
  return nullptr;
}

std::string describe(const DueRule& r) {
  std::string s = "at installation";
  if (r.interval_s > 0.0) s += "; within " + num(r.interval_s / 86400.0) + " day(s) before testing";
  if (r.after_maintenance) s += "; after major maintenance";
  if (!r.after_failure_of.empty()) {
    s += "; upon failure of ";
    for (std::size_t i = 0; i < r.after_failure_of.size(); ++i)
      s += std::string(i == 0                               ? ""
                       : i + 1 == r.after_failure_of.size() ? " or "
                                                            : ", ") +
           to_string(r.after_failure_of[i]);
  }
  return s;
}

DuePolicy cfr1066_due_policy() {
  constexpr double kDay = 86400.0;
  const std::string t = "1066.215 Table 1; ";
  auto row = [&](CheckKind k, double days, bool maintenance, std::vector<CheckKind> failures = {}) {
    return DueRule{k, t + clause_of(k), days * kDay, maintenance, std::move(failures)};
  };
  // CFR 1066.215 Table 1 [text]: the unloaded coast-down within 7 days, readiness within 1 day (7 with
  // supporting data), speed, speed linearity and response time within 370 days (no maintenance rule: a lab
  // that wants one sets after_maintenance in its profile); base inertia and acceleration/deceleration at
  // installation and after major maintenance; parasitic loss and friction compensation also upon failure of
  // the unloaded coast-down or readiness check.
  return DuePolicy{{
      row(CheckKind::parasitic, 0.0, true, {CheckKind::coastdown, CheckKind::readiness}),
      row(CheckKind::coastdown, 7.0, false),
      row(CheckKind::readiness, 1.0, false),
      row(CheckKind::inertia, 0.0, true),
      row(CheckKind::friction, 0.0, true, {CheckKind::coastdown, CheckKind::readiness}),
      row(CheckKind::accel_decel, 0.0, true),
      row(CheckKind::response, 370.0, false),
      row(CheckKind::speed, 370.0, false),
      row(CheckKind::linearity, 370.0, false),
  }};
}

const char* to_string(DueState s) {
  switch (s) {
    case DueState::current:
      return "current";
    case DueState::due_never_done:
      return "due (never passed)";
    case DueState::overdue:
      return "overdue";
    case DueState::failed:
      return "failed (last run)";
    case DueState::after_maintenance:
      return "due after maintenance";
    case DueState::after_failed_check:
      return "due after a failed check";
  }
  return "unknown";
}

std::vector<DueItem> due_checks(std::span<const CheckRecord> history, double now, const DuePolicy& p,
                                std::optional<double> maintenance_utc_s) {
  std::vector<CheckRecord> h(history.begin(), history.end());
  std::stable_sort(h.begin(), h.end(),
                   [](const CheckRecord& a, const CheckRecord& b) { return a.utc_s < b.utc_s; });
  auto latest_failure = [&](CheckKind k) {
    std::optional<double> t;
    for (const auto& r : h)
      if (r.kind == k && !r.passed) t = r.utc_s;
    return t;
  };
  std::vector<DueItem> out;
  for (const DueRule& rule : p.rules) {
    const CheckKind k = rule.kind;
    DueItem it;
    it.kind = k;
    it.clause = rule.clause;
    it.rule = describe(rule);
    it.interval_s = rule.interval_s;
    std::optional<double> last_pass;
    std::optional<bool> latest_passed;
    for (const auto& r : h)
      if (r.kind == k) {
        latest_passed = r.passed;
        if (r.passed) last_pass = r.utc_s;
      }
    it.last_pass_utc_s = last_pass;
    // The failed check strictly after the last pass, if any, that the row names.
    std::optional<CheckKind> failed_other;
    std::optional<double> failed_at;
    if (last_pass)
      for (CheckKind f : rule.after_failure_of)
        if (const auto t = latest_failure(f); t && *t > *last_pass && (!failed_at || *t > *failed_at)) {
          failed_other = f;
          failed_at = t;
        }
    if (latest_passed && !*latest_passed) {
      it.state = DueState::failed;
      it.why = "its latest run failed: repeat it after finding the cause";
    } else if (!last_pass) {
      it.state = DueState::due_never_done;
      it.why = "no passing run on record (due at installation)";
    } else if (rule.interval_s > 0.0 && now - *last_pass > rule.interval_s) {
      it.state = DueState::overdue;
      it.valid_until_utc_s = *last_pass + rule.interval_s;
      it.why = "last passed more than " + num(rule.interval_s / 86400.0) + " day(s) ago (within " +
               num(rule.interval_s / 86400.0) + " days, " + rule.clause + ")";
    } else if (rule.after_maintenance && maintenance_utc_s && *maintenance_utc_s > *last_pass) {
      it.state = DueState::after_maintenance;
      it.why = "major maintenance was logged after the last passing run (" + rule.clause + ")";
    } else if (failed_other) {
      it.state = DueState::after_failed_check;
      it.why = std::string("the ") + to_string(*failed_other) + " check failed after the last passing run (" +
               rule.clause + ")";
    } else if (rule.interval_s > 0.0) {
      it.valid_until_utc_s = *last_pass + rule.interval_s;
    }
    out.push_back(std::move(it));
  }
  return out;
}

}  // namespace loadtrim::core
