// The live status page (issue 19, docs/live.md): while a session runs, a read-only page shows its state and
// step, the time left, the running coast-down's speed trace as it is drawn (server-sent events), each
// coast-down's deviations as they come, the faults and findings, and the cautions. It is an observer like the
// console: it copies what it is given under a short lock and never blocks the session; the HTTP server
// (cpp-httplib, Debian libcpp-httplib-dev) runs on its own threads. It has no route that changes anything and
// never talks to the controller.
//
// Bound to 127.0.0.1 unless told otherwise; any other address needs an access token (refused at start
// without one), and a page with a token answers only requests that carry it (?token= or "Authorization:
// Bearer"). Self-contained: no external script, font or network.
#pragma once

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

class LivePage : public session::Observer {
 public:
  // Starts serving; nullptr with a sentence when the bind is malformed, not loopback without a token, or
  // cannot be bound.
  static std::unique_ptr<LivePage> start(const LiveOptions& options, const std::string& title,
                                         const std::string& cautions, std::string& error);
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

}  // namespace loadtrim::app
