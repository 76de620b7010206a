#include "src/core/stream.h"

#include <arpa/inet.h>
#include <netdb.h>
#include <netinet/in.h>
#include <poll.h>
#include <sys/socket.h>
#include <unistd.h>

#include <cerrno>
#include <cstring>
#include <mutex>
#include <stdexcept>
#include <streambuf>
#include <thread>
#include <vector>

#include "io/byte_source.h"
#include "io/csv.h"
#include "io/error.h"
#include "io/frames.h"
#include "src/core/apply.h"

namespace fluxtrim::core {
namespace {

// Bytes already read (to detect the format) first, then the descriptor.
class PrefixedSource : public io::ByteSource {
 public:
  PrefixedSource(std::string prefix, int fd)
      : prefix_(std::move(prefix)), fd_(fd, false) {}
  std::size_t Read(char* buf, std::size_t n) override {
    if (used_ < prefix_.size()) {
      const std::size_t k = std::min(n, prefix_.size() - used_);
      std::memcpy(buf, prefix_.data() + used_, k);
      used_ += k;
      return k;
    }
    return fd_.Read(buf, n);
  }
  bool Ready() override { return used_ < prefix_.size() || fd_.Ready(); }

 private:
  std::string prefix_;
  std::size_t used_ = 0;
  io::FdSource fd_;
};

// Output to a descriptor; send() with MSG_NOSIGNAL on sockets so that a
// client that went away is an error, not a SIGPIPE.
class FdStreambuf : public std::streambuf {
 public:
  explicit FdStreambuf(int fd) : fd_(fd), buffer_(1 << 16) {
    setp(buffer_.data(), buffer_.data() + buffer_.size());
    int type = 0;
    socklen_t len = sizeof type;
    socket_ = getsockopt(fd, SOL_SOCKET, SO_TYPE, &type, &len) == 0;
  }
  ~FdStreambuf() override { sync(); }

 protected:
  int_type overflow(int_type c) override {
    if (!Drain()) return traits_type::eof();
    if (!traits_type::eq_int_type(c, traits_type::eof())) {
      *pptr() = traits_type::to_char_type(c);
      pbump(1);
    }
    return traits_type::not_eof(c);
  }
  int sync() override { return Drain() ? 0 : -1; }

 private:
  bool Drain() {
    const char* p = pbase();
    std::size_t n = static_cast<std::size_t>(pptr() - pbase());
    while (n > 0) {
      const ssize_t w = socket_ ? ::send(fd_, p, n, MSG_NOSIGNAL)
                                : ::write(fd_, p, n);
      if (w < 0) {
        if (errno == EINTR) continue;
        return false;
      }
      p += w;
      n -= static_cast<std::size_t>(w);
    }
    setp(buffer_.data(), buffer_.data() + buffer_.size());
    return true;
  }
  int fd_;
  std::vector<char> buffer_;
  bool socket_ = false;
};

std::string ReadPrefix(int fd, StreamFormat* format) {
  std::string prefix;
  char buf[64];
  while (true) {
    const StreamFormat f = DetectStreamFormat(prefix, false);
    if (f != StreamFormat::kAuto) {
      *format = f;
      return prefix;
    }
    const ssize_t r = ::read(fd, buf, sizeof buf - 1);
    if (r < 0 && errno == EINTR) continue;
    if (r <= 0) {
      *format = DetectStreamFormat(prefix, true);
      return prefix;
    }
    prefix.append(buf, static_cast<std::size_t>(r));
  }
}

}  // namespace

StreamFormat DetectStreamFormat(const std::string& bytes, bool at_end) {
  // A frames stream opens with [varint length][0x0a][18]"fluxtrim-recording":
  // the magic ends by byte 24 (a length prefix of at most 3 bytes).
  if (bytes.substr(0, 24).find(io::kFramesMagic) != std::string::npos) {
    return StreamFormat::kFrames;
  }
  if (bytes.size() >= 24 || at_end) return StreamFormat::kCsv;
  // A complete first line that is not a frame header (whose tag byte 0x0a
  // stands at offset 1 or 2) is a CSV header.
  const bool tag_at_start =
      (bytes.size() > 1 && bytes[1] == '\n') || (bytes.size() > 2 && bytes[2] == '\n');
  if (!tag_at_start && bytes.find('\n') != std::string::npos) {
    return StreamFormat::kCsv;
  }
  return StreamFormat::kAuto;
}

std::size_t ServeStream(const proto::CompensationModel& model, int in_fd,
                        int out_fd, const std::string& name,
                        const StreamOptions& options) {
  StreamFormat format = options.format;
  std::string prefix;
  if (format == StreamFormat::kAuto) prefix = ReadPrefix(in_fd, &format);
  io::ReadOptions read = options.read;
  read.required = RequiredChannels(model);
  auto source = std::make_unique<PrefixedSource>(prefix, in_fd);
  std::unique_ptr<io::RecordingReader> reader;
  if (format == StreamFormat::kFrames) {
    reader = std::make_unique<io::FramesReader>(std::move(source), name, read);
  } else {
    reader = std::make_unique<io::CsvReader>(std::move(source), name, read);
  }
  FdStreambuf buf(out_fd);
  std::ostream out(&buf);
  const std::vector<io::ChannelInfo> schema = OutputSchema(reader->channels());
  std::unique_ptr<io::RecordingWriter> writer;
  std::function<void()> flush;
  if (format == StreamFormat::kFrames) {
    auto w = std::make_unique<io::FramesWriter>(out, name, schema);
    flush = [p = w.get()] { p->Flush(); };
    writer = std::move(w);
  } else {
    auto w = std::make_unique<io::CsvWriter>(out, name, schema);
    flush = [p = w.get()] { p->Flush(); };
    writer = std::move(w);
  }
  ApplyOptions apply;
  apply.chunk_rows = options.chunk_rows;
  apply.rate_check_rows = options.rate_check_rows;
  // Every chunk goes out at once: the reader returns what is waiting, not
  // a full chunk, so latency stays at the engine's k samples.
  apply.progress = [&flush, &out, &name](std::size_t) {
    flush();
    out.flush();
    if (!out) throw std::runtime_error(name + ": the reader went away");
  };
  std::unique_ptr<Adapter> adapter;
  if (options.adapt) {
    std::ostream* log = options.adapt_log;
    adapter = std::make_unique<Adapter>(
        model, options.adapt_options, "model",
        [log, &name](const AdaptUpdate& u) {
          // One write per line: clients of --listen share the log.
          if (log) *log << (name + ": " + Adapter::FormatUpdate(u) + "\n");
        });
    apply.observe = [p = adapter.get()](models::Compensator& c,
                                        const models::CompensatedSample* s,
                                        int n) { p->Observe(c, s, n); };
  }
  const ApplyResult result = ApplyChunked(model, *reader, *writer, apply);
  out.flush();
  if (!out) throw std::runtime_error(name + ": the reader went away");
  return result.samples;
}

void ListenAndServe(const proto::CompensationModel& model,
                    const ListenOptions& listen, const StreamOptions& options,
                    std::atomic<bool>* stop, std::ostream& log) {
  addrinfo hints{};
  hints.ai_family = AF_UNSPEC;
  hints.ai_socktype = SOCK_STREAM;
  hints.ai_flags = AI_PASSIVE;
  addrinfo* found = nullptr;
  const std::string port = std::to_string(listen.port);
  if (getaddrinfo(listen.host.c_str(), port.c_str(), &hints, &found) != 0 ||
      !found) {
    throw std::runtime_error("cannot resolve " + listen.host);
  }
  const int server = ::socket(found->ai_family, SOCK_STREAM, 0);
  const int yes = 1;
  setsockopt(server, SOL_SOCKET, SO_REUSEADDR, &yes, sizeof yes);
  if (server < 0 || ::bind(server, found->ai_addr, found->ai_addrlen) != 0 ||
      ::listen(server, 16) != 0) {
    const std::string reason = std::strerror(errno);
    freeaddrinfo(found);
    if (server >= 0) ::close(server);
    throw std::runtime_error("cannot listen on " + listen.host + ":" + port +
                             ": " + reason);
  }
  freeaddrinfo(found);
  sockaddr_storage bound{};
  socklen_t bound_len = sizeof bound;
  getsockname(server, reinterpret_cast<sockaddr*>(&bound), &bound_len);
  const int bound_port =
      ntohs(bound.ss_family == AF_INET6
                ? reinterpret_cast<sockaddr_in6*>(&bound)->sin6_port
                : reinterpret_cast<sockaddr_in*>(&bound)->sin_port);
  if (listen.on_listen) listen.on_listen(bound_port);

  std::mutex log_mutex;
  std::vector<std::thread> clients;
  std::atomic<std::size_t> finished{0};
  std::size_t accepted = 0;
  while (!stop->load() &&
         (listen.max_clients == 0 || accepted < listen.max_clients)) {
    pollfd p{server, POLLIN, 0};
    if (::poll(&p, 1, 100) <= 0) continue;
    sockaddr_storage peer{};
    socklen_t peer_len = sizeof peer;
    const int fd = ::accept(server, reinterpret_cast<sockaddr*>(&peer), &peer_len);
    if (fd < 0) continue;
    ++accepted;
    char host[NI_MAXHOST] = "?", serv[NI_MAXSERV] = "?";
    getnameinfo(reinterpret_cast<sockaddr*>(&peer), peer_len, host, sizeof host,
                serv, sizeof serv, NI_NUMERICHOST | NI_NUMERICSERV);
    const std::string name = std::string("client ") + host + ":" + serv;
    clients.emplace_back([&, fd, name] {
      try {
        const std::size_t n = ServeStream(model, fd, fd, name, options);
        std::lock_guard<std::mutex> lock(log_mutex);
        log << name << ": " << n << " samples compensated\n";
      } catch (const std::exception& e) {
        std::lock_guard<std::mutex> lock(log_mutex);
        log << "error: " << e.what() << " (connection closed)\n";
      }
      ::shutdown(fd, SHUT_RDWR);
      ::close(fd);
      ++finished;
    });
  }
  for (std::thread& t : clients) t.join();
  ::close(server);
}

}  // namespace fluxtrim::core
