#include "line/transport.hpp"

#include <array>
#include <asio.hpp>

namespace loadtrim::line {

namespace {

// Runs the io_context until `done` or the deadline; on timeout cancels the stream's operations and drains
// them, so no handler outlives the call (the blocking-with-timeout pattern of the Asio examples).
template <class Stream>
bool run_until(asio::io_context& io, Stream& s, Deadline d, const bool& done) {
  io.restart();
  const auto now = controller::Clock::now();
  if (d > now) io.run_for(d - now);
  if (done) return true;
  asio::error_code ignored;
  s.cancel(ignored);
  io.restart();
  io.run();
  return done;
}

template <class Stream>
class AsioStreamTransport : public Transport {
 public:
  bool is_open() const override { return stream_ && stream_->is_open(); }
  void close() override {
    if (stream_ && stream_->is_open()) {
      asio::error_code ec;
      stream_->close(ec);
    }
  }
  Result write(std::string_view bytes, Deadline d) override {
    if (!is_open()) return Result::retry("link not open");
    bool done = false;
    asio::error_code err;
    asio::async_write(*stream_, asio::buffer(bytes.data(), bytes.size()),
                      [&](const asio::error_code& ec, std::size_t) {
                        err = ec;
                        done = true;
                      });
    if (!run_until(io_, *stream_, d, done) || err == asio::error::operation_aborted) {
      close();
      return Result::retry("write timed out on " + describe());
    }
    if (err) {
      close();
      return Result::retry("write failed on " + describe() + ": " + err.message());
    }
    return Result::success();
  }
  Result read_some(std::string& out, Deadline d) override {
    if (!is_open()) return Result::retry("link not open");
    bool done = false;
    asio::error_code err;
    std::size_t n = 0;
    stream_->async_read_some(asio::buffer(buf_), [&](const asio::error_code& ec, std::size_t k) {
      err = ec;
      n = k;
      done = true;
    });
    const bool finished = run_until(io_, *stream_, d, done);
    if (n > 0) out.append(buf_.data(), n);
    if (!finished || err == asio::error::operation_aborted)
      return Result::success();  // timeout, nothing lost
    if (err) {
      close();
      return Result::retry(err == asio::error::eof
                               ? "connection closed by the controller (" + describe() + ")"
                               : "read failed on " + describe() + ": " + err.message());
    }
    return Result::success();
  }

 protected:
  asio::io_context io_;
  std::unique_ptr<Stream> stream_;
  std::array<char, 8192> buf_{};
};

class TcpTransport : public AsioStreamTransport<asio::ip::tcp::socket> {
 public:
  TcpTransport(std::string host, unsigned short port) : host_(std::move(host)), port_(port) {}
  std::string describe() const override { return "tcp " + host_ + ":" + std::to_string(port_); }
  Result open(Deadline d) override {
    close();
    stream_ = std::make_unique<asio::ip::tcp::socket>(io_);
    asio::error_code ec;
    asio::ip::tcp::resolver resolver(io_);
    const auto endpoints = resolver.resolve(host_, std::to_string(port_), ec);
    if (ec) return Result::fail("cannot resolve " + host_ + ": " + ec.message());
    bool done = false;
    asio::error_code err;
    asio::async_connect(*stream_, endpoints, [&](const asio::error_code& e, const asio::ip::tcp::endpoint&) {
      err = e;
      done = true;
    });
    if (!run_until(io_, *stream_, d, done) || err == asio::error::operation_aborted) {
      close();
      return Result::retry("connect to " + describe() + " timed out");
    }
    if (err) {
      close();
      return Result::retry("cannot connect to " + describe() + ": " + err.message());
    }
    stream_->set_option(asio::ip::tcp::no_delay(true), ec);
    return Result::success();
  }

 private:
  std::string host_;
  unsigned short port_;
};

class SerialTransport : public AsioStreamTransport<asio::serial_port> {
 public:
  explicit SerialTransport(SerialSettings s) : s_(std::move(s)) {}
  std::string describe() const override {
    return "serial " + s_.device + " " + std::to_string(s_.baud) + " baud";
  }
  Result open(Deadline) override {
    close();
    stream_ = std::make_unique<asio::serial_port>(io_);
    asio::error_code ec;
    stream_->open(s_.device, ec);
    if (ec) return Result::retry("cannot open " + describe() + ": " + ec.message());
    using B = asio::serial_port_base;
    const B::parity::type parity = s_.parity == SerialSettings::Parity::none  ? B::parity::none
                                   : s_.parity == SerialSettings::Parity::odd ? B::parity::odd
                                                                              : B::parity::even;
    stream_->set_option(B::baud_rate(s_.baud), ec);
    if (!ec) stream_->set_option(B::parity(parity), ec);
    if (!ec)
      stream_->set_option(
          B::stop_bits(s_.stop_bits == SerialSettings::StopBits::one ? B::stop_bits::one : B::stop_bits::two),
          ec);
    if (!ec) stream_->set_option(B::character_size(s_.data_bits), ec);
    if (!ec) stream_->set_option(B::flow_control(B::flow_control::none), ec);
    if (ec) {
      close();
      return Result::fail("cannot set serial options on " + describe() + ": " + ec.message());
    }
    return Result::success();
  }

 private:
  SerialSettings s_;
};

}  // namespace

std::unique_ptr<Transport> make_tcp_transport(std::string host, unsigned short port) {
  return std::make_unique<TcpTransport>(std::move(host), port);
}
std::unique_ptr<Transport> make_serial_transport(SerialSettings settings) {
  return std::make_unique<SerialTransport>(std::move(settings));
}

}  // namespace loadtrim::line
