// The live status page (issue 19, docs/live.md): while a session or a dyno check runs, a read-only page shows
// its state and step, the time left, the running coast-down's speed trace as it is drawn (server-sent
// events), each coast-down's deviations as they come, the faults and findings, and the cautions. It is an
// observer like the console: it copies what it is given under a short lock and never blocks the session; the
// HTTP server (cpp-httplib, Debian libcpp-httplib-dev) runs on its own threads. It has no route that changes
// anything and never talks to the controller.
//
// Bound to 127.0.0.1 unless told otherwise; any other address needs an access token (refused at start
// without one), and a page with a token answers only requests that carry it (?token= or "Authorization:
// Bearer"). Self-contained: no external script, font or network.
#pragma once

#include <atomic>
#include <functional>
#include <memory>
#include <string>

#include "session/events.hpp"

namespace loadtrim::app {

struct LiveOptions {
  std::string bind = "127.0.0.1:0";  // HOST:PORT; port 0 = any free port
  std::string token;                 // "" = none (loopback only)
};

// The options for `bind`, with the token from the environment (LOADTRIM_LIVE_TOKEN; never the command line,
// where other users could read it).
LiveOptions live_options_for(const std::string& bind);
// Whether LivePage::start accepts `options`: the bind is HOST:PORT with a numeric IPv4 host and a port
// 0-65535, and a host that is not loopback has a token. False with a sentence naming what is allowed. Checked
// before a session starts, so that nothing starts on options the page would refuse.
bool check_live_options(const LiveOptions& options, std::string& error);

// The same for a command's --live-bind, before anything starts: false, said on stderr ("refused: nothing was
// started"), when the page would refuse it.
bool live_bind_usable(const std::string& bind);

class LivePage;
// Starts the page for a command (run, resume, demo: `what` "session"; check: "check") and says where it is on
// stdout (a line; with `json` a {"type": "live_page", "url"} object), or on stderr why it is not served: the
// command goes on either way (nullptr).
std::unique_ptr<LivePage> serve_live_page(const std::string& bind, const std::string& title,
                                          const std::string& cautions, bool json,
                                          const std::string& what = "session");

class LivePage : public session::Observer {
 public:
  // Starts serving; nullptr with a sentence when the bind is malformed, not loopback without a token, or
  // cannot be bound.
  // `what`: "session", or "check" for a dyno check (the page shows the check's step, its coasts' traces and
  // each analysed result's rows instead of a session's coast-down deviations).
  static std::unique_ptr<LivePage> start(const LiveOptions& options, const std::string& title,
                                         const std::string& cautions, std::string& error,
                                         const std::string& what = "session");
  ~LivePage() override;
  LivePage(const LivePage&) = delete;
  LivePage& operator=(const LivePage&) = delete;

  std::string url() const;  // http://HOST:PORT/ (without the token)

  bool on_event(const session::Event& e) override;
  void on_progress(const session::Progress& p) override;
  std::string name() const override { return "the live page"; }

  struct Impl;

 private:
  explicit LivePage(std::unique_ptr<Impl> impl);
  std::unique_ptr<Impl> impl_;
};

// The lab overview's page (`loadtrim overview`, docs/live.md): the same bind and token rules as the live
// page, read-only. "/" answers the HTML that `page` makes for each request, "/overview.json" its JSON; `page`
// returns the HTTP status with the body (503 when the store cannot be read). Requests are answered one at a
// time (the store is read once per request).
class OverviewServer {
 public:
  using Page = std::function<std::pair<int, std::string>(bool json)>;
  static std::unique_ptr<OverviewServer> start(const LiveOptions& options, Page page, std::string& error);
  ~OverviewServer();
  OverviewServer(const OverviewServer&) = delete;
  OverviewServer& operator=(const OverviewServer&) = delete;
  std::string url() const;

  struct Impl;

 private:
  explicit OverviewServer(std::unique_ptr<Impl> impl);
  std::unique_ptr<Impl> impl_;
};

}  // namespace loadtrim::app
