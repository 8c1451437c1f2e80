#include "sim/sim_server.hpp"

#include <fcntl.h>
#include <termios.h>
#include <unistd.h>

#include <array>
#include <asio.hpp>
#include <chrono>
#include <deque>
#include <memory>

#include "sim/line_front_end.hpp"

namespace loadtrim::sim {

namespace {

using WallClock = std::chrono::steady_clock;

class Server {
 public:
  Server(FrontEnd& fe, const ServerSettings& s)
      : fe_(fe), settings_(s), tick_(io_), signals_(io_, SIGINT, SIGTERM), start_(WallClock::now()) {}

  int run(const std::function<void(const std::string&)>& announce) {
    announce_ = announce;
    signals_.async_wait([this](const asio::error_code&, int) { io_.stop(); });
    if (settings_.pty) {
      if (!open_pty(announce)) return 1;
    } else {
      acceptor_ = std::make_unique<asio::ip::tcp::acceptor>(io_);
      asio::ip::tcp::endpoint ep(asio::ip::make_address(settings_.bind), settings_.port);
      acceptor_->open(ep.protocol());
      acceptor_->set_option(asio::ip::tcp::acceptor::reuse_address(true));
      acceptor_->bind(ep);
      acceptor_->listen(1);
      announce("loadtrim-sim listening tcp " + settings_.bind + ":" +
               std::to_string(acceptor_->local_endpoint().port()) + " pid=" + std::to_string(::getpid()));
      accept();
    }
    last_tick_ = WallClock::now();
    schedule_tick();
    io_.run();
    return 0;
  }

 private:
  double wall_s() const { return std::chrono::duration<double>(WallClock::now() - start_).count(); }

  bool open_pty(const std::function<void(const std::string&)>& announce) {
    const int master = ::posix_openpt(O_RDWR | O_NOCTTY);
    if (master < 0 || ::grantpt(master) != 0 || ::unlockpt(master) != 0) return false;
    const char* name = ::ptsname(master);
    if (!name) return false;
    const std::string path = name;
    // Keep a slave descriptor open so the master never sees EIO while no client has the device open, and put
    // the line in raw mode (no echo, no line editing) for the client.
    slave_fd_ = ::open(path.c_str(), O_RDWR | O_NOCTTY);
    termios t{};
    if (slave_fd_ >= 0 && ::tcgetattr(slave_fd_, &t) == 0) {
      ::cfmakeraw(&t);
      ::cfsetspeed(&t, B115200);
      ::tcsetattr(slave_fd_, TCSANOW, &t);
    }
    pty_ = std::make_unique<asio::posix::stream_descriptor>(io_, master);
    announce("loadtrim-sim listening pty " + path + " pid=" + std::to_string(::getpid()));
    connected_ = true;
    read_pty();
    return true;
  }

  void accept() {
    acceptor_->async_accept([this](const asio::error_code& ec, asio::ip::tcp::socket s) {
      if (ec) return;
      socket_ = std::make_unique<asio::ip::tcp::socket>(std::move(s));
      socket_->set_option(asio::ip::tcp::no_delay(true));
      connected_ = true;
      outq_.clear();
      read_socket();
    });
  }

  void drop_client() {
    if (socket_) {
      asio::error_code ec;
      socket_->shutdown(asio::ip::tcp::socket::shutdown_both, ec);
      socket_->close(ec);
    }
    if (connected_ && !settings_.pty) {
      connected_ = false;
      fe_.on_disconnect();
      outq_.clear();
      accept();
    }
  }

  void on_bytes(std::size_t n) {
    std::vector<std::string> out;
    fe_.on_bytes(std::string_view(buf_.data(), n), wall_s(), out);
    const double release = wall_s() + fe_.delay_replies_ms() / 1000.0;
    for (auto& s : out) outq_.push_back({release, std::move(s)});
    flush();
  }

  void read_socket() {
    socket_->async_read_some(asio::buffer(buf_), [this](const asio::error_code& ec, std::size_t n) {
      if (ec) return drop_client();
      on_bytes(n);
      if (socket_ && socket_->is_open()) read_socket();
    });
  }

  void read_pty() {
    pty_->async_read_some(asio::buffer(buf_), [this](const asio::error_code& ec, std::size_t n) {
      if (ec) return;
      on_bytes(n);
      read_pty();
    });
  }

  void flush() {
    if (writing_ || !connected_) return;
    const double now = wall_s();
    std::string chunk;
    while (!outq_.empty() && outq_.front().first <= now && chunk.size() < 65536) {
      chunk += outq_.front().second;
      outq_.pop_front();
    }
    if (chunk.empty()) return;
    writing_ = true;
    auto data = std::make_shared<std::string>(std::move(chunk));
    auto done = [this, data](const asio::error_code& ec, std::size_t) {
      writing_ = false;
      if (ec) return drop_client();
      flush();
    };
    if (settings_.pty)
      asio::async_write(*pty_, asio::buffer(*data), done);
    else if (socket_)
      asio::async_write(*socket_, asio::buffer(*data), done);
    else
      writing_ = false;
  }

  void schedule_tick() {
    tick_.expires_after(std::chrono::milliseconds(2));
    tick_.async_wait([this](const asio::error_code& ec) {
      if (ec) return;
      const auto now = WallClock::now();
      const double wall_dt = std::chrono::duration<double>(now - last_tick_).count();
      last_tick_ = now;
      std::vector<std::string> out, notes;
      // Bounded catch-up: after a stall of the host, simulated time jumps at most 50 ms of wall time.
      fe_.tick(std::min(wall_dt, 0.05) * settings_.time_scale, wall_s(), out, notes);
      // Latched faults are also said on the simulator's own output (for its operator and the tests): a
      // watchdog stop there proves the controller acted without the tool.
      if (announce_)
        for (const auto& l : notes) announce_("loadtrim-sim: " + l);
      if (connected_)
        for (auto& s : out) outq_.push_back({wall_s(), std::move(s)});
      if (fe_.take_drop_request()) drop_client();
      flush();
      if (settings_.exit_after_s > 0.0 && wall_s() > settings_.exit_after_s) {
        io_.stop();
        return;
      }
      schedule_tick();
    });
  }

  FrontEnd& fe_;
  ServerSettings settings_;
  std::function<void(const std::string&)> announce_;
  asio::io_context io_;
  asio::steady_timer tick_;
  asio::signal_set signals_;
  WallClock::time_point start_, last_tick_;
  std::unique_ptr<asio::ip::tcp::acceptor> acceptor_;
  std::unique_ptr<asio::ip::tcp::socket> socket_;
  std::unique_ptr<asio::posix::stream_descriptor> pty_;
  int slave_fd_ = -1;
  bool connected_ = false;
  bool writing_ = false;
  std::array<char, 4096> buf_{};
  std::deque<std::pair<double, std::string>> outq_;
};

}  // namespace

int run_server(FrontEnd& front_end, const ServerSettings& server,
               const std::function<void(const std::string&)>& announce) {
  Server s(front_end, server);
  return s.run(announce);
}

int run_server(const physics::Truth& truth, const SimSettings& sim, const ServerSettings& server,
               const std::function<void(const std::string&)>& announce) {
  LineFrontEnd fe(truth, sim);
  return run_server(fe, server, announce);
}

}  // namespace loadtrim::sim
