// The Modbus adapter's sample poll (dyno-adapters/modbus/modbus_controller.hpp) against a fake Modbus TCP
// server on loopback (libmodbus's own server calls, in a thread of this test): one request per sample when
// the map places the sample's registers in one block, a poll read register by register that takes longer
// than one poll period dropped and counted, a poll that reads the time of the last one again dropped and
// counted, and a sample with a non-finite value or an undefined mode code dropped and counted, not fatal
// (docs/modbus.md, "One sample, one moment"; docs/safety.md §2). Every value compared with is the one the
// test put in the server's registers, stated beside it.
#include <gtest/gtest.h>
#include <modbus/modbus.h>
#include <netinet/in.h>
#include <sys/socket.h>
#include <unistd.h>

#include <atomic>
#include <cmath>
#include <cstring>
#include <functional>
#include <mutex>
#include <thread>

#include "config/cell_loader.hpp"
#include "modbus/modbus_controller.hpp"
#include "registry.hpp"

using namespace loadtrim;
using namespace loadtrim::modbus;
using controller::Result;
using std::chrono::milliseconds;

namespace {

const std::string kCell = std::string(LOADTRIM_SOURCE_DIR) + "/config/cells/sim-modbus.toml";

// One client at a time on 127.0.0.1 (an ephemeral port); input and holding registers 0 to 99. `slow_addr`:
// a read starting at that input address is answered `slow` late.
class FakeServer {
 public:
  FakeServer() {
    ctx_ = modbus_new_tcp("127.0.0.1", 0);
    map_ = modbus_mapping_new(0, 0, 100, 100);
    listen_ = ::socket(AF_INET, SOCK_STREAM, 0);
    sockaddr_in a{};
    a.sin_family = AF_INET;
    a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
    int one = 1;
    ::setsockopt(listen_, SOL_SOCKET, SO_REUSEADDR, &one, sizeof one);
    if (::bind(listen_, reinterpret_cast<sockaddr*>(&a), sizeof a) != 0 || ::listen(listen_, 1) != 0)
      throw std::runtime_error("cannot listen on loopback");
    socklen_t n = sizeof a;
    ::getsockname(listen_, reinterpret_cast<sockaddr*>(&a), &n);
    port_ = ntohs(a.sin_port);
    worker_ = std::thread([this] { run(); });
  }
  ~FakeServer() {
    stop_ = true;
    ::shutdown(listen_, SHUT_RDWR);
    ::close(listen_);
    if (conn_ >= 0) ::shutdown(conn_, SHUT_RDWR);
    worker_.join();
    modbus_mapping_free(map_);
    modbus_free(ctx_);
  }
  unsigned short port() const { return port_; }
  void input(int addr, std::uint16_t v) {
    std::lock_guard<std::mutex> l(mu_);
    map_->tab_input_registers[addr] = v;
  }
  void input32(int addr, std::uint32_t v) {
    input(addr, static_cast<std::uint16_t>(v >> 16));
    input(addr + 1, static_cast<std::uint16_t>(v & 0xFFFF));
  }
  void slow_read(int addr, milliseconds delay) {
    slow_addr_ = addr;
    slow_ms_ = static_cast<int>(delay.count());
  }
  // Input-register reads (function 04) received, and how many registers the last asked for.
  int input_reads() const { return input_reads_; }
  int last_count() const { return last_count_; }

 private:
  void run() {
    while (!stop_) {
      conn_ = ::accept(listen_, nullptr, nullptr);
      if (conn_ < 0) return;
      modbus_set_socket(ctx_, conn_);
      std::uint8_t q[MODBUS_TCP_MAX_ADU_LENGTH];
      for (;;) {
        const int n = modbus_receive(ctx_, q);
        if (n <= 0) break;
        // MBAP header (7 bytes), then function, address, count.
        if (n >= 12 && q[7] == 0x04) {
          ++input_reads_;
          last_count_ = q[10] << 8 | q[11];
          if ((q[8] << 8 | q[9]) == slow_addr_) std::this_thread::sleep_for(milliseconds(slow_ms_.load()));
        }
        std::lock_guard<std::mutex> l(mu_);
        modbus_reply(ctx_, q, n, map_);
      }
      ::close(conn_);
      conn_ = -1;
    }
  }
  modbus_t* ctx_ = nullptr;
  modbus_mapping_t* map_ = nullptr;
  int listen_ = -1;
  std::atomic<int> conn_{-1};
  unsigned short port_ = 0;
  std::thread worker_;
  std::atomic<bool> stop_{false};
  std::mutex mu_;
  std::atomic<int> slow_addr_{-1}, slow_ms_{0};
  std::atomic<int> input_reads_{0}, last_count_{0};
};

// The shipped map (speed input 0 uint16 × 0.01 km/h, force 1 int16 × 0.5 N, time 2-3 uint32 ms, mode 4,
// status 5) on the fake server's port; the controller's clock not compared with the wall (the fake's clock
// moves only when the test says).
std::unique_ptr<ModbusController> adapter(unsigned short port, RegisterMap* tweak_map = nullptr,
                                          void (*tweak)(RegisterMap&) = nullptr) {
  auto cell = config::load_cell(kCell, adapters::production().sections());
  adapters::production().override_link(cell, {port, ""});
  auto& s = std::any_cast<Settings&>(cell.adapter_settings);
  if (tweak) tweak(s.map);
  if (tweak_map) *tweak_map = s.map;
  controller::Limits l{160.0, 8000.0, 10000.0, false};
  controller::Timeouts t = cell.timeouts;
  t.heartbeat_interval = milliseconds(10000);  // no heartbeats in these scripts
  return std::make_unique<ModbusController>(s, t, l);
}

// Polls until `n` samples are handed up or `polls` receive calls were made.
std::vector<controller::Sample> collect(controller::Controller& c, std::size_t n, int polls = 50) {
  std::vector<controller::Sample> got;
  for (int i = 0; i < polls && got.size() < n; ++i)
    if (!c.receive_samples(got).ok()) break;
  return got;
}

}  // namespace

// The shipped map places speed, force, time, mode and status in input registers 0 to 5: one read of six.
TEST(ModbusPoll, ASampleInOneBlockIsOneRequest) {
  FakeServer srv;
  srv.input(0, 5000);    // 50 km/h
  srv.input32(2, 1000);  // 1 s
  srv.input(4, 1);       // speed hold
  auto c = adapter(srv.port());
  ASSERT_TRUE(c->connect().ok());
  ASSERT_TRUE(c->start_stream(50.0).ok());
  const int before = srv.input_reads();
  std::vector<controller::Sample> got;
  ASSERT_TRUE(c->receive_samples(got).ok());
  ASSERT_EQ(got.size(), 1u);
  EXPECT_DOUBLE_EQ(got[0].speed_kmh, 50.0);
  EXPECT_DOUBLE_EQ(got[0].time_s, 1.0);
  EXPECT_EQ(got[0].mode, controller::Mode::speed_hold);
  EXPECT_EQ(srv.input_reads() - before, 1);
  EXPECT_EQ(srv.last_count(), 6);
}

// The mode register swapped with the error register (mode 6, error 4): still one block, of seven;
// then to input 40 (addresses 6 to 39 partly unnamed): read register by register, and the time read 120 ms
// after the speed, longer than the 20 ms poll period at 50 Hz, drops the sample with a named reason.
TEST(ModbusPoll, ASampleReadInPiecesOverMoreThanAPollPeriodIsDropped) {
  {
    FakeServer srv;
    auto c = adapter(srv.port(), nullptr, [](RegisterMap& m) {
      m.regs[Q::mode].address = 6;
      m.regs[Q::error].address = 4;
    });
    ASSERT_TRUE(c->connect().ok());
    ASSERT_TRUE(c->start_stream(50.0).ok());
    std::vector<controller::Sample> got;
    ASSERT_TRUE(c->receive_samples(got).ok());
    EXPECT_EQ(srv.last_count(), 7);
  }
  FakeServer srv;
  srv.input(0, 5000);
  srv.input32(2, 1000);
  srv.slow_read(2, milliseconds(120));
  auto c = adapter(srv.port(), nullptr, [](RegisterMap& m) { m.regs[Q::mode].address = 40; });
  ASSERT_TRUE(c->connect().ok());
  ASSERT_TRUE(c->start_stream(50.0).ok());
  std::vector<controller::Sample> got;
  c->receive_samples(got);  // every poll of the sample gap (1 s) takes at least 120 ms: none passes
  EXPECT_TRUE(got.empty()) << got.size() << " samples whose time was read 120 ms after their speed";
  EXPECT_GE(c->stats().lines_rejected, 1u);
  EXPECT_NE(c->stats().last_rejected.find("not of one moment"), std::string::npos)
      << c->stats().last_rejected;
  bool warned = false;
  for (const auto& w : c->take_warnings()) warned = warned || w.code == "sample_reads_slow";
  EXPECT_TRUE(warned);
  // Read quickly, the same map's samples pass.
  srv.slow_read(-1, milliseconds(0));
  srv.input32(2, 5000);
  got = collect(*c, 1);
  ASSERT_EQ(got.size(), 1u);
  EXPECT_DOUBLE_EQ(got[0].time_s, 5.0);
}

// A time register that does not move between polls (a count coarser than the poll period): the second poll
// is no new sample. Times 1.000 s, 1.000 s, 1.020 s: two samples handed up, one counted as a repeat.
TEST(ModbusPoll, APollThatReadsTheLastTimeAgainIsNoNewSample) {
  FakeServer srv;
  srv.input(0, 5000);
  srv.input32(2, 1000);
  auto c = adapter(srv.port());
  ASSERT_TRUE(c->connect().ok());
  ASSERT_TRUE(c->start_stream(50.0).ok());
  std::vector<controller::Sample> got;
  ASSERT_TRUE(c->receive_samples(got).ok());
  ASSERT_EQ(got.size(), 1u);
  std::thread later([&] {
    std::this_thread::sleep_for(milliseconds(50));  // two or three polls read 1.000 s again
    srv.input32(2, 1020);
  });
  // A receive that read only repeats returns with nothing new (samples came: no silence); the next one
  // brings the new sample.
  bool ok = true;
  for (int i = 0; i < 50 && ok && got.size() < 2; ++i) ok = c->receive_samples(got).ok();
  later.join();
  ASSERT_TRUE(ok);
  ASSERT_EQ(got.size(), 2u);
  EXPECT_DOUBLE_EQ(got[1].time_s, 1.02);
  EXPECT_GE(c->stats().samples_duplicate, 1u);
  bool warned = false;
  for (const auto& w : c->take_warnings()) warned = warned || w.code == "sample_time_repeated";
  EXPECT_TRUE(warned);
}

// A NaN in the force register (float32 quiet NaN 0x7FC00000, IEEE 754) or a mode code the map does not
// define (9) for about three polls makes malformed samples: dropped and counted, and the link goes on to the
// next valid sample (force 200 N, float32 0x43480000); an undefined mode with the emergency-stop bit set in
// the status register stays fatal.
TEST(ModbusPoll, ANonFiniteValueOrAnUndefinedModeIsAMalformedSampleNotAFault) {
  FakeServer srv;
  srv.input(0, 5000);
  srv.input(4, 1);
  srv.input32(2, 1000);
  srv.input32(30, 0x7FC00000u);  // the force as float32 at input 30
  auto c = adapter(srv.port(), nullptr, [](RegisterMap& m) {
    m.regs[Q::force].address = 30;
    m.regs[Q::force].type = Type::float32;
    m.regs[Q::force].scale = 1.0;
  });
  ASSERT_TRUE(c->connect().ok());
  ASSERT_TRUE(c->start_stream(50.0).ok());
  const auto fix_after = [&](std::function<void()> f) {
    return std::thread([f] {
      std::this_thread::sleep_for(milliseconds(60));
      f();
    });
  };
  std::vector<controller::Sample> got;
  {
    std::thread t = fix_after([&] { srv.input32(30, 0x43480000u); });
    const Result r = c->receive_samples(got);
    t.join();
    ASSERT_TRUE(r.ok()) << r.message;
  }
  ASSERT_EQ(got.size(), 1u);
  EXPECT_DOUBLE_EQ(got[0].force_n, 200.0);
  EXPECT_GE(c->stats().samples_malformed, 1u);
  EXPECT_NE(c->stats().last_malformed.find("not a finite number"), std::string::npos)
      << c->stats().last_malformed;
  const auto malformed = c->stats().samples_malformed;
  srv.input(4, 9);
  srv.input32(2, 2000);
  got.clear();
  {
    std::thread t = fix_after([&] {
      srv.input32(2, 3000);
      srv.input(4, 1);
    });
    const Result r = c->receive_samples(got);
    t.join();
    ASSERT_TRUE(r.ok()) << r.message;
  }
  ASSERT_EQ(got.size(), 1u);
  EXPECT_DOUBLE_EQ(got[0].time_s, 3.0);
  EXPECT_GT(c->stats().samples_malformed, malformed);
  EXPECT_NE(c->stats().last_malformed.find("mode register value 9"), std::string::npos)
      << c->stats().last_malformed;
  // An undefined mode with the emergency-stop bit (2) set: fatal, naming both.
  srv.input(4, 9);
  srv.input(5, 2);
  srv.input32(2, 4000);
  got.clear();
  const Result r3 = c->receive_samples(got);
  EXPECT_EQ(r3.status, controller::Result::Status::fatal) << r3.message;
  EXPECT_NE(r3.message.find("ESTOP"), std::string::npos) << r3.message;
}
