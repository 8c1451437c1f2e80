// The framed adapter (dyno-adapters/framed/framed_controller.hpp) over a scripted in-memory byte link, no
// socket and no process: each request the adapter writes is answered by the test's script, on time, late
// or never, with whatever bytes the script chooses. What is checked is the adapter's own contract
// (docs/framed.md section 1 and the adapter's header): a late reply is never taken for the answer to a later
// request, a reply's mode must be the commanded one, samples carry the controller's clock, unmapped
// status-word bits are warned about once, and nothing a controller states outside any dyno is believed
// (the controller layer's bounds, src/controller/controller.cpp: common practice, no source). Every value a
// check compares with is the one the script sent, stated beside it.
#include "framed/framed_controller.hpp"

#include <gtest/gtest.h>

#include <cmath>
#include <functional>
#include <optional>
#include <thread>

#include "config/toml_reader.hpp"

using namespace loadtrim;
using namespace loadtrim::framed;
using controller::Result;
using Clock = std::chrono::steady_clock;
using std::chrono::milliseconds;

namespace {

const std::string kCell = std::string(LOADTRIM_SOURCE_DIR) + "/config/cells/sim-framed.toml";

Table shipped() {
  auto r = config::TomlReader::from_file(kCell);
  return read_table(r);
}

// The bytes of a reply frame with the shipped table's checksum.
std::string frame(const std::vector<std::string>& words) {
  return encode_frame(words, true);
}

// A reply the script gives to one request: its bytes, `delay` after the request was written.
struct Reply {
  std::string bytes;
  milliseconds delay{0};
};

// An in-memory link: each request written is decoded and handed to `answer`, whose reply (if any) becomes
// readable after its delay. Like TCP, closing it loses the replies on their way; like a serial line
// (`serial`), a reply on its way arrives after the link is opened again.
class ScriptedLink : public line::Transport {
 public:
  explicit ScriptedLink(bool serial) : serial_(serial) {}
  std::function<std::optional<Reply>(const std::vector<std::string>& request)> answer;
  std::vector<std::vector<std::string>> requests;  // every request written, decoded (code first)

  Result open(controller::Deadline) override {
    open_ = true;
    return Result::success();
  }
  void close() override {
    open_ = false;
    if (!serial_) in_flight_.clear();
  }
  bool is_open() const override { return open_; }
  Result write(std::string_view bytes, controller::Deadline) override {
    const Decoded d = decode_payload(bytes.substr(1, bytes.size() - 2), true);
    requests.push_back(d.words);
    if (answer)
      if (auto r = answer(d.words)) in_flight_.emplace_back(Clock::now() + r->delay, r->bytes);
    return Result::success();
  }
  Result read_some(std::string& out, controller::Deadline d) override {
    for (;;) {
      const auto now = Clock::now();
      bool got = false;
      for (auto it = in_flight_.begin(); it != in_flight_.end();)
        if (it->first <= now) {
          out += it->second;
          it = in_flight_.erase(it);
          got = true;
        } else {
          ++it;
        }
      if (got || now >= d) return Result::success();
      std::this_thread::sleep_until(std::min(d, now + milliseconds(1)));
    }
  }
  std::string describe() const override { return "scripted link"; }
  std::size_t sent(const std::string& code) const {
    std::size_t n = 0;
    for (const auto& r : requests) n += !r.empty() && r[0] == code;
    return n;
  }

 private:
  bool serial_;
  bool open_ = false;
  std::vector<std::pair<Clock::time_point, std::string>> in_flight_;
};

// Reply timeout 400 ms: the adapter's quiet window after a timeout is a quarter of it, 100 ms. The scripts'
// times keep at least 50 ms from every edge, so that a loaded machine does not change what happens.
controller::Timeouts timeouts() {
  controller::Timeouts t;
  t.reply = milliseconds(400);
  t.heartbeat_interval = milliseconds(10000);  // no heartbeats in the scripts
  return t;
}

struct Rig {
  ScriptedLink* link = nullptr;
  std::unique_ptr<FramedController> c;
  explicit Rig(bool serial = false, Table t = shipped()) {
    auto l = std::make_unique<ScriptedLink>(serial);
    link = l.get();
    // Limits: 160 km/h, 8000 N, clock rate up to 10000×, the controller's clock not compared with the wall.
    c = std::make_unique<FramedController>(std::move(l), std::move(t), timeouts(),
                                           controller::Limits{160.0, 8000.0, 10000.0, false});
    EXPECT_TRUE(c->connect().ok());
  }
};

}  // namespace

// IEEE 754 NaN compares false with everything: a "nan" diameter must fail, not slip through a comparison.
TEST(FramedAdapter, IdentifyWithNonFiniteOrImpossibleValuesIsRefused) {
  for (const std::string dia : {"nan", "inf"}) {
    Rig rig;
    rig.link->answer = [&](const auto&) {
      return Reply{frame({"ID", "0", dia, "1250", "20000", "100000", "1"})};
    };
    controller::ControllerInfo info;
    const Result r = rig.c->identify(info);
    EXPECT_EQ(r.status, Result::Status::fatal) << dia;
    EXPECT_NE(r.message.find("roller_diameter_m"), std::string::npos) << r.message;
  }
  // Finite but impossible: a negative diameter (-1.2192 m) and a base inertia of 1e300 kg.
  for (const auto& [dia, inertia, what] :
       {std::tuple<std::string, std::string, std::string>{"-12192", "1250", "roller diameter of -1.2192 m"},
        {"12192", "1e300", "base inertia of 1e+300 kg"}}) {
    Rig rig;
    rig.link->answer = [&](const auto&) {
      return Reply{frame({"ID", "0", dia, inertia, "20000", "100000", "1"})};
    };
    controller::ControllerInfo info;
    const Result r = rig.c->identify(info);
    EXPECT_EQ(r.status, Result::Status::fatal);
    EXPECT_NE(r.message.find(what), std::string::npos) << r.message;
  }
}

TEST(FramedAdapter, ReadBacksNoDynoCouldHoldAreRefused) {
  {
    Rig rig;  // inertia_kg*10: -14910 counts is -1491 kg
    rig.link->answer = [](const auto&) { return Reply{frame({"RI", "0", "-14910"})}; };
    double kg = 0;
    const Result r = rig.c->read_inertia(kg);
    EXPECT_EQ(r.status, Result::Status::fatal);
    EXPECT_NE(r.message.find("inertia of -1491 kg"), std::string::npos) << r.message;
  }
  {
    Rig rig;  // 10^15 counts of 0.1 kg (the most a field carries): 1e14 kg
    rig.link->answer = [](const auto&) { return Reply{frame({"RI", "0", "1000000000000000"})}; };
    double kg = 0;
    const Result r = rig.c->read_inertia(kg);
    EXPECT_EQ(r.status, Result::Status::fatal);
    EXPECT_NE(r.message.find("inertia of 1e+14 kg"), std::string::npos) << r.message;
  }
  {
    // The write is echoed, the read-back says -1491 kg: refused as a read-back no dyno holds.
    Rig rig;
    rig.link->answer = [](const std::vector<std::string>& q) -> std::optional<Reply> {
      if (q[0] == "WI") return Reply{frame({"WI", "0", q[2]})};
      return Reply{frame({"RI", "0", "-14910"})};
    };
    const Result r = rig.c->set_inertia(1491.0);
    EXPECT_EQ(r.status, Result::Status::fatal);
    EXPECT_NE(r.message.find("read-back inertia of -1491 kg"), std::string::npos) << r.message;
  }
  {
    // f2 of 10^10 (10^15 counts of 1e-5): F(160 km/h) = 1e10 × 160² N, far beyond any dyno's 1e6 N.
    Rig rig;
    rig.link->answer = [](const auto&) {
      return Reply{frame({"RC", "0", "4238", "3135", "1000000000000000"})};
    };
    core::RoadLoad c;
    const Result r = rig.c->read_coefficients(c);
    EXPECT_EQ(r.status, Result::Status::fatal);
    EXPECT_NE(r.message.find("beyond any dyno"), std::string::npos) << r.message;
  }
}

// Replies carry no sequence number. The first read gets its reply 450 ms late, after its 400 ms deadline; the
// second must be answered by its own reply (2222.0 kg, 200 ms after it was sent), never by the late one
// (1111.0 kg). Over TCP the late reply is lost with the connection the adapter opens again; over a serial
// line it arrives while the adapter waits for the line to fall quiet (400 to 500 ms) before sending the
// second.
TEST(FramedAdapter, ALateReplyIsNeverTakenForTheNextRequestsAnswer) {
  for (const bool serial : {false, true}) {
    Rig rig(serial);
    int n = 0;
    rig.link->answer = [&](const auto&) {
      return ++n == 1 ? Reply{frame({"RI", "0", "11110"}), milliseconds(450)}
                      : Reply{frame({"RI", "0", "22220"}), milliseconds(200)};
    };
    double kg = 0;
    const Result first = rig.c->read_inertia(kg);
    EXPECT_EQ(first.status, Result::Status::retryable) << first.message;
    const Result second = rig.c->read_inertia(kg);
    ASSERT_TRUE(second.ok()) << second.message;
    EXPECT_DOUBLE_EQ(kg, 2222.0) << (serial ? "serial" : "tcp");
    if (serial) {
      EXPECT_EQ(rig.c->stats().lines_rejected, 1u);  // the late reply, dropped and counted
    }
  }
}

// A hold times out; its late acknowledgement (mode 1, hold) must not acknowledge the stop that follows, which
// the device never answers.
TEST(FramedAdapter, AStopIsNotAcknowledgedByALateHoldReply) {
  for (const bool serial : {false, true})
    for (const int late_ms : {450, 700}) {
      // Over a serial line: at 450 ms it arrives while the stop waits for the line to fall quiet (dropped);
      // at 700 ms after the stop was sent (400 ms timeout + 100 ms quiet window) and before the stop's
      // deadline (about 900 ms), where only its mode (hold, not stop) tells it apart.
      Rig rig(serial);
      rig.link->answer = [&](const std::vector<std::string>& q) -> std::optional<Reply> {
        if (q[2] == "H") return Reply{frame({"MD", "0", "1"}), milliseconds(late_ms)};
        return std::nullopt;  // the stop is never answered
      };
      const Result hold = rig.c->hold_speed(80.0);
      EXPECT_EQ(hold.status, Result::Status::retryable) << hold.message;
      const Result stop = rig.c->controlled_stop();
      EXPECT_FALSE(stop.ok()) << late_ms << " ms: the stop was taken as acknowledged";
      EXPECT_EQ(rig.link->sent("MD"), 2u);
    }
}

// docs/framed.md section 2: a reply's mode is the device's word on what it does now.
TEST(FramedAdapter, AReplysModeMustBeTheCommandedOne) {
  Rig rig;
  std::string mode = "0";  // [framed.modes] idle = 0, hold = 1, stop = 3
  rig.link->answer = [&](const auto&) { return Reply{frame({"MD", "0", mode})}; };
  const Result hold = rig.c->hold_speed(80.0);
  EXPECT_EQ(hold.status, Result::Status::fatal);
  EXPECT_NE(hold.message.find("states mode idle, not the speed-hold commanded"), std::string::npos)
      << hold.message;
  mode = "1";
  EXPECT_TRUE(rig.c->hold_speed(80.0).ok());
  mode = "0";  // a stop at standstill may end in idle at once
  EXPECT_TRUE(rig.c->controlled_stop().ok());
  mode = "3";
  EXPECT_TRUE(rig.c->controlled_stop().ok());
  EXPECT_FALSE(rig.c->idle().ok());  // stop (3) is not idle (0)
}

// Samples carry the controller's clock (the sample reply's time_s, 612.34 s and on), and a status-word bit
// the table does not map (32) is warned about once, by name, however often it comes.
TEST(FramedAdapter, SamplesCarryTheControllersClockAndUnmappedBitsAreWarnedOnce) {
  Rig rig;
  int n = 0;
  rig.link->answer = [&](const std::vector<std::string>& q) -> std::optional<Reply> {
    if (q[0] == "HB") return Reply{frame({"HB", "0"})};
    // time_s*1000 speed_kmh*100 force_n*10 mode flags: 612.34 s + 20 ms per sample, 50 km/h, 100 N, hold,
    // flags 48 = at_setpoint (16) + an unmapped 32.
    return Reply{frame({"RV", "0", std::to_string(612340 + 20 * n++), "5000", "1000", "1", "48"})};
  };
  ASSERT_TRUE(rig.c->start_stream(50.0).ok());
  std::vector<controller::Sample> got;
  for (int i = 0; i < 3; ++i) ASSERT_TRUE(rig.c->receive_samples(got).ok());
  ASSERT_GE(got.size(), 3u);
  EXPECT_DOUBLE_EQ(got[0].time_s, 612.34);
  EXPECT_DOUBLE_EQ(got[1].time_s, 612.36);
  EXPECT_EQ(got[0].flags, controller::kFlagAtSetpoint);
  // One warning, named "status_bits", with the bit and the table section, however many samples carried it.
  const auto w = rig.c->take_warnings();
  ASSERT_EQ(w.size(), 1u);
  EXPECT_EQ(w[0].code, "status_bits");
  EXPECT_EQ(w[0].count, 1u);
  EXPECT_NE(w[0].text.find("0x20"), std::string::npos) << w[0].text;
  EXPECT_NE(w[0].text.find("[framed.flags]"), std::string::npos) << w[0].text;
  EXPECT_EQ(rig.c->stats().warnings, 1u);
}

// The controller layer collects what an adapter has read when a command is acknowledged, with a deadline
// already passed: a polled adapter must not send a poll then, whose reply would come late.
TEST(FramedAdapter, NoPollIsSentWithoutTimeForItsReply) {
  Rig rig;
  rig.link->answer = [&](const std::vector<std::string>& q) -> std::optional<Reply> {
    if (q[0] == "MD") return Reply{frame({"MD", "0", "1"})};
    return Reply{frame({"RV", "0", "1000", "5000", "1000", "1", "16"})};
  };
  ASSERT_TRUE(rig.c->start_stream(50.0).ok());
  std::this_thread::sleep_for(milliseconds(25));  // a poll is due (50 Hz: every 20 ms)
  ASSERT_TRUE(rig.c->hold_speed(50.0).ok());
  EXPECT_EQ(rig.link->sent("RV"), 0u);
  EXPECT_EQ(rig.c->stats().lines_rejected, 0u);
}

// A device that answers each sample request twice (so the tool reads one poll behind and sees every sample
// twice): a reply with the time of the last sample is no new sample. Times 612.34 s, 612.34 s, 612.36 s,
// 612.36 s, ...: the samples handed up have strictly ascending times, the repeats are counted and named.
TEST(FramedAdapter, ASampleWithTheTimeOfTheLastOneIsNoNewSample) {
  Rig rig;
  int n = 0;
  rig.link->answer = [&](const std::vector<std::string>& q) -> std::optional<Reply> {
    if (q[0] == "HB") return Reply{frame({"HB", "0"})};
    const int k = n++ / 2;
    return Reply{frame({"RV", "0", std::to_string(612340 + 20 * k), "5000", "1000", "1", "16"})};
  };
  ASSERT_TRUE(rig.c->start_stream(50.0).ok());
  std::vector<controller::Sample> got;
  // A receive that read only a repeat returns with nothing new (a sample came: no silence).
  for (int i = 0; i < 40 && got.size() < 4; ++i) ASSERT_TRUE(rig.c->receive_samples(got).ok());
  ASSERT_GE(got.size(), 4u);
  for (std::size_t i = 1; i < got.size(); ++i) EXPECT_GT(got[i].time_s, got[i - 1].time_s) << i;
  EXPECT_GE(rig.c->stats().samples_duplicate, 3u);
  bool warned = false;
  for (const auto& w : rig.c->take_warnings()) warned = warned || w.code == "sample_time_repeated";
  EXPECT_TRUE(warned);
}

// docs/framed.md: a sample poll's reply is awaited timeouts.reply_ms (400 ms here) from when the poll was
// sent, whatever slice the controller layer waits in (its heartbeat interval, 60 ms here). The device answers
// every sample 150 ms late and every heartbeat at once: samples come, no timeout.
TEST(FramedAdapter, ASamplePollWaitsItsReplyTimeoutNotTheHeartbeatSlice) {
  auto l = std::make_unique<ScriptedLink>(false);
  ScriptedLink* link = l.get();
  controller::Timeouts t = timeouts();
  t.heartbeat_interval = milliseconds(60);
  FramedController c(std::move(l), shipped(), t, controller::Limits{160.0, 8000.0, 10000.0, false});
  ASSERT_TRUE(c.connect().ok());
  int n = 0;
  link->answer = [&](const std::vector<std::string>& q) -> std::optional<Reply> {
    if (q[0] == "HB") return Reply{frame({"HB", "0"})};
    return Reply{frame({"RV", "0", std::to_string(612340 + 20 * n++), "5000", "1000", "1", "16"}),
                 milliseconds(150)};
  };
  ASSERT_TRUE(c.start_stream(50.0).ok());
  std::vector<controller::Sample> got;
  for (int i = 0; i < 3; ++i) {
    const Result r = c.receive_samples(got);
    ASSERT_TRUE(r.ok()) << r.message;
  }
  ASSERT_EQ(got.size(), 3u);
  EXPECT_DOUBLE_EQ(got[0].time_s, 612.34);
  EXPECT_EQ(c.stats().lines_rejected, 0u);
}
