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
