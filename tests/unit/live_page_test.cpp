// The live status page's server in-process (src/app/live_page.cpp, docs/live.md), with cpp-httplib's own
// client on loopback: what the session gave it is what /state answers, the token is required when set, a
// non-loopback bind without a token is refused, a bind form that is not HOST:PORT is refused, a cell name
// cannot end the page's script element, and the page stops cleanly while a stream is open. The rules are
// issue 19's; HTTP status codes are RFC 9110's (200, 401); "</script" ending a script element is the HTML
// standard's script-data rule.
#include "app/live_page.hpp"

#include <gtest/gtest.h>
#include <httplib.h>

#include <nlohmann/json.hpp>
#include <thread>

#include "app/overview.hpp"

using namespace loadtrim;

namespace {

int port_of(const std::string& url) {
  return std::stoi(url.substr(url.rfind(':') + 1));
}

session::Event state_event(session::State from, session::State to) {
  return session::Event{session::ev::StateChanged{from, to, "test"}, std::nullopt, nullptr};
}

}  // namespace

TEST(LivePage, StateAnswersWhatTheSessionGave) {
  std::string err;
  auto page = app::LivePage::start({"127.0.0.1:0", ""}, "title", "cautions", err);
  ASSERT_TRUE(page) << err;
  page->on_event(state_event(session::State::connect, session::State::warm_up));
  for (int i = 0; i < 10; ++i) {
    session::Progress p;
    p.state = session::State::coast_down;
    p.coastdown = 2;
    p.speed_kmh = 120.0 - i;
    p.cell_time_s = 1000.0 + 0.5 * i;  // 0.5 s apart: each kept (the page keeps points >= 0.25 s apart)
    page->on_progress(p);
  }
  httplib::Client cli("127.0.0.1", port_of(page->url()));
  cli.set_read_timeout(5, 0);
  auto r = cli.Get("/state");
  ASSERT_TRUE(r);
  EXPECT_EQ(r->status, 200);
  const auto j = nlohmann::json::parse(r->body);
  EXPECT_EQ(j["state"], "coast_down");
  EXPECT_EQ(j["coastdown"], 2);
  EXPECT_EQ(j["trace"]["run"], 2);
  ASSERT_EQ(j["trace"]["points"].size(), 10u);
  EXPECT_DOUBLE_EQ(j["trace"]["points"][9][1].get<double>(), 111.0);
  EXPECT_EQ(j["cautions"], "cautions");
  // Read-only: nothing but GET is answered with 200.
  auto post = cli.Post("/state", "x", "text/plain");
  ASSERT_TRUE(post);
  EXPECT_NE(post->status, 200);
}

TEST(LivePage, TheTokenIsRequiredWhenSet) {
  std::string err;
  auto page = app::LivePage::start({"127.0.0.1:0", "t0ken"}, "title", "", err);
  ASSERT_TRUE(page) << err;
  httplib::Client cli("127.0.0.1", port_of(page->url()));
  cli.set_read_timeout(5, 0);
  auto none = cli.Get("/state");
  ASSERT_TRUE(none);
  EXPECT_EQ(none->status, 401);
  auto wrong = cli.Get("/state?token=t0kem");
  ASSERT_TRUE(wrong);
  EXPECT_EQ(wrong->status, 401);
  auto right = cli.Get("/state?token=t0ken");
  ASSERT_TRUE(right);
  EXPECT_EQ(right->status, 200);
  auto bearer = cli.Get("/state", {{"Authorization", "Bearer t0ken"}});
  ASSERT_TRUE(bearer);
  EXPECT_EQ(bearer->status, 200);
}

TEST(LivePage, BindsAreCheckedBeforeServing) {
  std::string err;
  EXPECT_FALSE(app::LivePage::start({"0.0.0.0:0", ""}, "t", "", err));
  EXPECT_NE(err.find("token"), std::string::npos) << err;
  for (const char* bad : {"localhost:80", "127.0.0.1", "127.0.0.1:99999", ":80", "127.0.0.1:8a"}) {
    std::string e;
    EXPECT_FALSE(app::LivePage::start({bad, "x"}, "t", "", e)) << bad;
    EXPECT_NE(e.find("HOST:PORT"), std::string::npos) << bad << ": " << e;
  }
}

TEST(LivePage, AFieldCannotEndThePagesScript) {
  std::string err;
  auto page = app::LivePage::start({"127.0.0.1:0", ""}, "cell </script><script>alert(1)</script>", "", err);
  ASSERT_TRUE(page) << err;
  httplib::Client cli("127.0.0.1", port_of(page->url()));
  cli.set_read_timeout(5, 0);
  auto r = cli.Get("/");
  ASSERT_TRUE(r);
  EXPECT_EQ(r->status, 200);
  // The page's own markup has exactly one script element; the title's "</script>" arrives escaped.
  std::size_t n = 0;
  for (std::size_t i = 0; (i = r->body.find("</script>", i)) != std::string::npos; ++i) ++n;
  EXPECT_EQ(n, 1u);
}

TEST(LivePage, StopsWhileAStreamIsOpen) {
  std::string err;
  auto page = app::LivePage::start({"127.0.0.1:0", ""}, "t", "", err);
  ASSERT_TRUE(page) << err;
  const int port = port_of(page->url());
  std::thread reader([port] {
    httplib::Client cli("127.0.0.1", port);
    cli.set_read_timeout(10, 0);
    cli.Get("/events", [](const char*, size_t) { return true; });
  });
  std::this_thread::sleep_for(std::chrono::milliseconds(300));
  page->on_event(state_event(session::State::connect, session::State::warm_up));
  const auto t0 = std::chrono::steady_clock::now();
  page.reset();  // stops the server with a stream open
  const double took = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  reader.join();
  EXPECT_LT(took, 8.0) << "stopping waited for the stream's keep-alive";
}

// --- a dyno check's page (issue 19: "While a session or check runs, the tool serves a read-only page") ---
// The check's step in words from its progress, its coast's trace, each analysed record's rows as they come,
// and its end. The rows are what the record says (src/session/events.cpp's "analysed" JSON), not recomputed.
TEST(LivePage, ACheckShowsItsStepItsCoastsTraceAndEachResultAsItComes) {
  std::string err;
  auto page =
      app::LivePage::start({"127.0.0.1:0", ""}, "loadtrim live: check coastdown on cell c", "", err, "check");
  ASSERT_TRUE(page) << err;
  for (int i = 0; i < 6; ++i) {
    session::Progress p;
    p.state = session::State::coast_down;
    p.coastdown = 1;
    p.speed_kmh = 130.0 - 10.0 * i;
    p.cell_time_s = 20.0 + 0.5 * i;
    p.step = "coast-down 1 at 1000 kg";
    page->on_progress(p);
  }
  httplib::Client cli("127.0.0.1", port_of(page->url()));
  cli.set_read_timeout(5, 0);
  auto r = cli.Get("/state");
  ASSERT_TRUE(r);
  auto j = nlohmann::json::parse(r->body);
  EXPECT_EQ(j["what"], "check");
  EXPECT_EQ(j["step"], "coast-down 1 at 1000 kg");
  EXPECT_EQ(j["trace"]["run"], 1);
  EXPECT_EQ(j["trace"]["points"].size(), 6u);
  EXPECT_TRUE(j["results"].empty());

  session::ev::UnloadedCoastdownAnalysed a;
  a.run = 1;
  a.inertia_kg = 1000.0;
  a.result.passed = false;
  a.result.verdict = "FAIL (40 CFR 1066.270): one interval outside";
  core::IntervalResult in1;
  in1.v_high_mph = 80.0;
  in1.v_low_mph = 70.0;
  in1.deviation_n = 12.5;
  in1.limit_n = 10.0;
  in1.passed = false;
  core::IntervalResult in2 = in1;
  in2.v_high_mph = 70.0;
  in2.v_low_mph = 60.0;
  in2.deviation_n = 1.5;
  in2.passed = true;
  a.result.intervals = {in1, in2};
  page->on_event(session::Event{a, std::nullopt, nullptr});
  r = cli.Get("/state");
  ASSERT_TRUE(r);
  j = nlohmann::json::parse(r->body);
  ASSERT_EQ(j["results"].size(), 1u);
  const auto& res = j["results"][0];
  EXPECT_EQ(res["title"], "coast-down 1");
  EXPECT_EQ(res["passed"], false);
  EXPECT_EQ(res["verdict"], "FAIL (40 CFR 1066.270): one interval outside");
  ASSERT_EQ(res["rows"].size(), 2u);
  // The columns are the interval's plain members; the second row's deviation is the second interval's.
  std::size_t dev = 0;
  for (; dev < res["columns"].size(); ++dev)
    if (res["columns"][dev] == "deviation_n") break;
  ASSERT_LT(dev, res["columns"].size());
  EXPECT_DOUBLE_EQ(res["rows"][1][dev].get<double>(), 1.5);
  EXPECT_FALSE(j["finished"].get<bool>());

  session::ev::CheckFinished f;
  f.check = "coastdown";
  f.end = "failed";
  f.verdict = a.result.verdict;
  page->on_event(session::Event{f, std::nullopt, nullptr});
  r = cli.Get("/state");
  ASSERT_TRUE(r);
  j = nlohmann::json::parse(r->body);
  EXPECT_TRUE(j["finished"].get<bool>());
  EXPECT_EQ(j["result"], "failed");
}

// --- the lab overview (issue 19: "A lab overview page lists every cell's current or last session from the
// store. Self-contained like the report") ---
namespace {

app::OverviewView sample_view() {
  app::OverviewView v;
  v.store = "/lab/store.sqlite";
  v.engine = "sqlite";
  v.now_utc = "2026-12-03T12:00:00.000Z";
  store::CellOverview c;
  c.cell = "cell <script>alert(1)</script>";
  store::LatestRow s;
  s.what = "session";
  s.name = "20261203T080000Z-car";
  s.kind = "iterative";
  s.cell = c.cell;
  s.vehicle = "car \"A\" & <b>B</b>";
  s.started_utc = "2026-12-03T08:00:00.000Z";
  s.result = "accepted";
  s.accepted = true;
  s.final_set = core::RoadLoad{101.5, 0.5, 0.025};
  s.folder = "/lab/sessions/<i>x</i>";
  s.verify_outcome = "verified";
  c.session = s;
  // One started an hour ago (running) and one 13 h ago (past the 12 h default: stale).
  c.running.push_back({"session", "/lab/sessions/r1", "r1", c.cell, "car-r1", "iterative",
                       "2026-12-03T11:00:00.000Z", "http://127.0.0.1:8080/", ""});
  c.running.push_back({"check", "/lab/checks/r2", "r2", c.cell, "", "parasitic", "2026-12-02T23:00:00.000Z",
                       "http://127.0.0.1:8081/\"><script>x</script>", ""});
  v.cells.push_back(c);
  return v;
}

}  // namespace

// HTML standard: "<" and "&" in text must be character references for the text to stay text; a double quote
// inside a double-quoted attribute too. No script element at all: the page is markup and style only.
TEST(Overview, TheHtmlEscapesEveryValueFromTheStoreAndHasNoScript) {
  const std::string html = app::overview_html(sample_view(), 10);
  EXPECT_EQ(html.find("<script"), std::string::npos) << html;
  EXPECT_EQ(html.find("<b>B</b>"), std::string::npos);
  EXPECT_EQ(html.find("<i>x</i>"), std::string::npos);
  EXPECT_NE(html.find("cell &lt;script&gt;alert(1)&lt;/script&gt;"), std::string::npos);
  EXPECT_NE(html.find("car &quot;A&quot; &amp; &lt;b&gt;B&lt;/b&gt;"), std::string::npos);
  EXPECT_NE(html.find("<meta http-equiv=\"refresh\" content=\"10\">"), std::string::npos);
  // Self-contained: nothing fetched from elsewhere (no src= or stylesheet link).
  EXPECT_EQ(html.find("src="), std::string::npos);
  EXPECT_EQ(html.find("<link"), std::string::npos);
  // The running session's live page is linked; the stale one's address is not.
  EXPECT_NE(html.find("<a href=\"http://127.0.0.1:8080/\">"), std::string::npos);
  EXPECT_NE(html.find("no end indexed (stale?)"), std::string::npos);
}

// The stale bound (12 h by default, common practice, no source): an hour old is running, 13 h old is stale;
// with the bound at 14 h both run. Times are ISO 8601 UTC, 3600 s an hour (SI).
TEST(Overview, RunningOrStaleIsJudgedByTheBound) {
  app::OverviewView v = sample_view();
  nlohmann::json j = app::overview_json(v);
  ASSERT_EQ(j["cells"].size(), 1u);
  EXPECT_EQ(j["cells"][0]["state"], "running");
  EXPECT_EQ(j["cells"][0]["running"][0]["state"], "running");
  EXPECT_EQ(j["cells"][0]["running"][1]["state"], "stale");
  EXPECT_EQ(j["cells"][0]["session"]["final_set"]["f0_n"], 101.5);
  EXPECT_TRUE(j["cells"][0]["check"].is_null());
  // With the bound at 14 h the check of 23:00 is still stale: the cell's session of 11:00 started after it,
  // and a cell runs one at a time (a start without an end before the cell's next start crashed). Without
  // that later session, and with the cell's indexed session of 08:00 moved before it, it is running.
  v.stale_after_s = 14.0 * 3600.0;
  j = app::overview_json(v);
  EXPECT_EQ(j["cells"][0]["running"][1]["state"], "stale");
  v.cells[0].running.erase(v.cells[0].running.begin());
  EXPECT_EQ(app::overview_json(v)["cells"][0]["running"][0]["state"], "stale");
  v.cells[0].session->started_utc = "2026-12-02T20:00:00.000Z";
  EXPECT_EQ(app::overview_json(v)["cells"][0]["running"][0]["state"], "running");
  v.stale_after_s = 12.0 * 3600.0;
  EXPECT_EQ(app::overview_json(v)["cells"][0]["state"], "stale");
  v.cells[0].running.clear();
  EXPECT_EQ(app::overview_json(v)["cells"][0]["state"], "idle");
  const std::string text = app::overview_text(sample_view());
  EXPECT_NE(text.find("running since 2026-12-03T11:00:00.000Z, live page at http://127.0.0.1:8080/"),
            std::string::npos)
      << text;
  EXPECT_NE(text.find("no end indexed (stale?)"), std::string::npos) << text;
}

// A running row the cell's later indexed session or check follows is stale (a cell runs one at a time), and
// so is one that starts more than a minute after the view's clock (a time not to be believed); the text form
// shows control characters from the store as '?' (no escape sequence reaches a terminal).
TEST(Overview, ACrashedStartFollowedByALaterSessionOrAFutureStartIsStale) {
  app::OverviewView v = sample_view();
  v.cells[0].running.resize(1);  // r1, started 11:00, an hour before the view
  v.cells[0].session->started_utc = "2026-12-03T11:30:00.000Z";
  EXPECT_EQ(app::overview_json(v)["cells"][0]["running"][0]["state"], "stale");
  v.cells[0].session->started_utc = "2026-12-03T08:00:00.000Z";
  EXPECT_EQ(app::overview_json(v)["cells"][0]["running"][0]["state"], "running");
  v.cells[0].running[0].started_utc = "2099-01-01T00:00:00.000Z";
  EXPECT_EQ(app::overview_json(v)["cells"][0]["running"][0]["state"], "stale");
  v.cells[0].running[0].started_utc = "2026-12-03T12:00:30.000Z";  // 30 s ahead: clocks differ that much
  EXPECT_EQ(app::overview_json(v)["cells"][0]["running"][0]["state"], "running");
  v.cells[0].session->vehicle = "car\x1b[2J\nfake line";
  const std::string text = app::overview_text(v);
  EXPECT_EQ(text.find('\x1b'), std::string::npos) << text;
  EXPECT_NE(text.find("car?[2J?fake line"), std::string::npos) << text;
  // "accepted" is said once.
  EXPECT_EQ(text.find("accepted, accepted"), std::string::npos) << text;
}

// The overview's server follows the live page's rules (docs/live.md): a token required when set (401 without:
// RFC 9110), without one a Host naming loopback only, a non-loopback bind refused without a token, nothing
// but GET answered; the store unreadable is the page's 503.
TEST(Overview, TheServerFollowsTheLivePagesBindAndTokenRules) {
  std::string err;
  EXPECT_FALSE(app::OverviewServer::start(
      {"0.0.0.0:0", ""}, [](bool) { return std::make_pair(200, ""); }, err));
  EXPECT_NE(err.find("token"), std::string::npos) << err;
  bool down = false;
  const app::OverviewServer::Page page = [&down](bool json) -> std::pair<int, std::string> {
    if (down) return {503, "down"};
    return {200, json ? app::overview_json(sample_view()).dump() : app::overview_html(sample_view(), 10)};
  };
  auto open = app::OverviewServer::start({"127.0.0.1:0", ""}, page, err);
  ASSERT_TRUE(open) << err;
  {
    httplib::Client cli("127.0.0.1", port_of(open->url()));
    cli.set_read_timeout(5, 0);
    auto r = cli.Get("/overview.json");
    ASSERT_TRUE(r);
    EXPECT_EQ(r->status, 200);
    EXPECT_EQ(nlohmann::json::parse(r->body)["cells"].size(), 1u);
    auto other_host = cli.Get("/", {{"Host", "attacker.example"}});
    ASSERT_TRUE(other_host);
    EXPECT_EQ(other_host->status, 401);
    auto post = cli.Post("/", "x", "text/plain");
    ASSERT_TRUE(post);
    EXPECT_NE(post->status, 200);
    down = true;
    auto d = cli.Get("/");
    ASSERT_TRUE(d);
    EXPECT_EQ(d->status, 503);
  }
  open.reset();
  down = false;
  auto tok = app::OverviewServer::start({"127.0.0.1:0", "s3cret"}, page, err);
  ASSERT_TRUE(tok) << err;
  httplib::Client cli("127.0.0.1", port_of(tok->url()));
  cli.set_read_timeout(5, 0);
  auto none = cli.Get("/");
  ASSERT_TRUE(none);
  EXPECT_EQ(none->status, 401);
  auto with = cli.Get("/?token=s3cret");
  ASSERT_TRUE(with);
  EXPECT_EQ(with->status, 200);
  EXPECT_NE(with->body.find("Lab overview"), std::string::npos);
}
