// The lab overview (issue 19, docs/live.md "The lab overview"): every cell's current or last session and dyno
// check, from the lab's record store (Store::overview). `loadtrim overview` prints it once as text or JSON,
// or serves it as a read-only, self-contained page with the live page's bind and token rules (live_page.hpp),
// refreshing itself. It reads the store only; it never talks to a dyno.
#pragma once

#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "store/store.hpp"

namespace loadtrim::app {

// A running row older than this is shown as "no end indexed (stale?)" rather than running (common practice,
// no source: longer than any session or check runs, short enough that a crashed one does not show for days).
inline constexpr double kDefaultStaleAfterS = 12.0 * 3600.0;

struct OverviewView {
  std::string store, engine;  // Store::location() and engine()
  std::string now_utc;        // when it was read (record::utc_now())
  double stale_after_s = kDefaultStaleAfterS;
  std::vector<store::CellOverview> cells;
};

// The view as one JSON object: {"store", "engine", "utc", "stale_after_s", "cells": [{"cell", "state"
// ("running", "stale" or "idle"), "running": [...], "session": {...} or null, "check": {...} or null}]}; a
// running row has "state" "running" or "stale" by its start against `now_utc`.
nlohmann::json overview_json(const OverviewView& v);
// The same as lines of text for a terminal.
std::string overview_text(const OverviewView& v);
// The same as one self-contained HTML page (its style inside, no script, no external resource), every value
// from the store escaped (report::xml_escape); `refresh_s` > 0 adds a meta refresh of that many seconds.
std::string overview_html(const OverviewView& v, int refresh_s);
// A page that says the store could not be read (the server answers it with 503 and tries again at the next
// refresh).
std::string overview_error_html(const std::string& sentence, int refresh_s);

}  // namespace loadtrim::app
