#include "src/core/stream.h"

#include <arpa/inet.h>
#include <netinet/in.h>
#include <sys/socket.h>
#include <unistd.h>

#include <atomic>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <random>
#include <sstream>
#include <thread>

#include <gtest/gtest.h>

#include "io/model_file.h"
#include "io/recording.h"
#include "models/tolles_lawson.h"
#include "src/core/apply.h"

namespace fluxtrim::core {
namespace {

constexpr double kPi = 3.14159265358979323846;

proto::CompensationModel TestModel() {
  proto::CompensationModel m;
  m.set_schema_version(io::kModelSchemaVersion);
  m.mutable_terms()->set_set("default");
  int i = 0;
  for (const std::string& name : models::TermNames(models::TermOptions())) {
    proto::Coefficient* c = m.add_coefficients();
    c->set_name(name);
    c->set_value(name.rfind("perm", 0) == 0  ? 2.0 * i - 1
                 : name.rfind("ind", 0) == 0 ? 1e-4 * (i - 5)
                                             : 5e-5 * (i - 11));
    m.mutable_terms()->add_names(name);
    ++i;
  }
  m.set_derivative_half_width(2);
  m.set_sample_rate_hz(10.0);
  m.set_gap_factor(1.5);
  m.set_lag_s(0.04);
  m.set_interference_mean_nt(1.0);
  m.mutable_filter()->set_order(4);
  m.mutable_filter()->set_low_hz(0.1);
  m.mutable_filter()->set_high_hz(0.9);
  m.mutable_inputs()->set_field_source("f");
  return m;
}

std::string TempPath(const std::string& name) {
  return ::testing::TempDir() + "stream_test_" + name;
}

// Writes a CSV recording with a time gap; returns its text.
std::string WriteRecording(const std::string& path, std::size_t n) {
  io::Table t({{"time", "s", ""}, {"bx", "nT", ""}, {"by", "nT", ""},
               {"bz", "nT", ""}, {"f", "nT", ""}});
  std::mt19937_64 rng(3);
  std::uniform_real_distribution<double> u(-1, 1);
  for (std::size_t i = 0; i < n; ++i) {
    double time = 1000.0 + 0.1 * static_cast<double>(i);
    if (i >= n / 2) time += 2.0;
    const double a = 0.3 * std::sin(2 * kPi * 0.1 * time);
    const double b[3] = {20000 * std::cos(a), 20000 * std::sin(a), 45000};
    t.Column("time").push_back(time);
    t.Column("bx").push_back(b[0]);
    t.Column("by").push_back(b[1]);
    t.Column("bz").push_back(b[2]);
    t.Column("f").push_back(std::sqrt(b[0] * b[0] + b[1] * b[1] + b[2] * b[2]) +
                            0.05 * u(rng));
  }
  io::WriteRecording(path, t);
  std::ifstream in(path);
  std::stringstream s;
  s << in.rdbuf();
  return s.str();
}

int Shell(const std::string& command) { return std::system(command.c_str()); }

// Issue acceptance: `stream MODEL < line.csv` equals `apply MODEL line.csv`
// to 1e-9 nT on every sample.
TEST(StreamTest, StdinStreamEqualsApplyOnEverySample) {
  const std::string model = TempPath("model.txt");
  io::WriteModelFile(model, TestModel());
  const std::string rec = TempPath("line.csv");
  WriteRecording(rec, 500);
  const std::string streamed = TempPath("streamed.csv");
  const std::string applied = TempPath("applied.csv");
  ASSERT_EQ(Shell(std::string(FLUXTRIM_EXE) + " stream " + model + " < " + rec +
                " > " + streamed + " 2>/dev/null"),
            0);
  ASSERT_EQ(Shell(std::string(FLUXTRIM_EXE) + " apply " + model + " " + rec +
                " -o " + applied + " > /dev/null"),
            0);
  const io::Table a = io::ReadRecording(applied);
  const io::Table s = io::ReadRecording(streamed);
  ASSERT_EQ(a.rows(), 500u);
  ASSERT_EQ(s.rows(), a.rows());
  for (std::size_t i = 0; i < a.rows(); ++i) {
    EXPECT_NEAR(s.Column("f_comp")[i], a.Column("f_comp")[i], 1e-9) << i;
    EXPECT_EQ(s.Column("flags")[i], a.Column("flags")[i]) << i;
  }
}

TEST(StreamTest, DetectsTheInputFormatFromTheFirstBytes) {
  EXPECT_EQ(DetectStreamFormat("time,bx,by,bz,f\n1,2", false), StreamFormat::kCsv);
  EXPECT_EQ(DetectStreamFormat("time,b", false), StreamFormat::kAuto);
  std::string frames = "\x40\x0a\x12";
  frames += "fluxtrim-recording";
  EXPECT_EQ(DetectStreamFormat(frames, false), StreamFormat::kFrames);
  EXPECT_EQ(DetectStreamFormat(frames.substr(0, 8), false), StreamFormat::kAuto);
}

// A loopback server for the fault tests: serves max_clients, logs to log.
class Server {
 public:
  explicit Server(std::size_t clients) {
    ListenOptions listen;
    listen.port = 0;
    listen.max_clients = clients;
    std::atomic<int> port{0};
    listen.on_listen = [&port](int p) { port = p; };
    thread_ = std::thread([this, listen] {
      ListenAndServe(TestModel(), listen, StreamOptions(), &stop_, log_);
    });
    while (port == 0) std::this_thread::sleep_for(std::chrono::milliseconds(5));
    port_ = port;
  }
  ~Server() {
    stop_ = true;
    thread_.join();
  }
  void Join() { thread_.join(); stop_ = true; thread_ = std::thread([] {}); }
  int Connect() const {
    const int fd = ::socket(AF_INET, SOCK_STREAM, 0);
    sockaddr_in addr{};
    addr.sin_family = AF_INET;
    addr.sin_port = htons(static_cast<uint16_t>(port_));
    addr.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
    EXPECT_EQ(::connect(fd, reinterpret_cast<sockaddr*>(&addr), sizeof addr), 0);
    return fd;
  }
  std::string log() const { return log_.str(); }

 private:
  std::atomic<bool> stop_{false};
  std::ostringstream log_;
  std::thread thread_;
  int port_ = 0;
};

void SendAll(int fd, const std::string& data) {
  std::size_t sent = 0;
  while (sent < data.size()) {
    const ssize_t w = ::send(fd, data.data() + sent, data.size() - sent, MSG_NOSIGNAL);
    if (w <= 0) return;
    sent += static_cast<std::size_t>(w);
  }
}

std::string ReceiveAll(int fd) {
  std::string out;
  char buf[4096];
  ssize_t r;
  while ((r = ::recv(fd, buf, sizeof buf, 0)) > 0) out.append(buf, static_cast<std::size_t>(r));
  return out;
}

std::size_t CountDataLines(const std::string& csv) {
  std::size_t lines = 0;
  std::istringstream in(csv);
  std::string line;
  bool header = false;
  while (std::getline(in, line)) {
    if (line.empty() || line[0] == '#') continue;
    if (!header) {
      header = true;
      continue;
    }
    ++lines;
  }
  return lines;
}

TEST(StreamTest, TcpClientsGetOneOutputPerInputAndAMalformedClientIsClosedAlone) {
  const std::string csv = WriteRecording(TempPath("tcp.csv"), 300);
  Server server(2);
  // Client A: good; client B: a malformed line after 120 samples.
  const int a = server.Connect();
  const int b = server.Connect();
  std::string bad = csv;
  std::size_t pos = 0;
  for (int line = 0; line < 123; ++line) pos = bad.find('\n', pos) + 1;
  bad = bad.substr(0, pos) + "1012.5,abc,1,2,3\n";
  std::thread send_b([&] {
    SendAll(b, bad);
    ::shutdown(b, SHUT_WR);
  });
  std::thread send_a([&] {
    SendAll(a, csv);
    ::shutdown(a, SHUT_WR);
  });
  const std::string out_b = ReceiveAll(b);
  const std::string out_a = ReceiveAll(a);
  send_a.join();
  send_b.join();
  ::close(a);
  ::close(b);
  server.Join();
  EXPECT_EQ(CountDataLines(out_a), 300u);
  // Everything accepted before the fault is delivered.
  EXPECT_GE(CountDataLines(out_b), 115u);
  EXPECT_LT(CountDataLines(out_b), 300u);
  EXPECT_NE(server.log().find("expected"), std::string::npos) << server.log();
}

TEST(StreamTest, ClientDisconnectingMidFrameIsReportedAndDoesNotStopTheServer) {
  // A frames header and part of a frame, then the client goes away.
  const std::string rec = TempPath("frames.ftrec");
  {
    WriteRecording(TempPath("tcp.csv"), 300);
    io::Table t = io::ReadRecording(TempPath("tcp.csv"));
    io::WriteRecording(rec, t);
  }
  std::ifstream in(rec, std::ios::binary);
  std::stringstream bytes;
  bytes << in.rdbuf();
  const std::string all = bytes.str();
  Server server(2);
  const int cut = server.Connect();
  SendAll(cut, all.substr(0, all.size() - 7));
  ::shutdown(cut, SHUT_WR);
  ReceiveAll(cut);
  ::close(cut);
  const int good = server.Connect();
  std::thread send([&] {
    SendAll(good, all);
    ::shutdown(good, SHUT_WR);
  });
  const std::string out = ReceiveAll(good);
  send.join();
  ::close(good);
  server.Join();
  EXPECT_GT(out.size(), 300u * 8u);
  EXPECT_NE(server.log().find("error"), std::string::npos) << server.log();
}

TEST(StreamTest, ModelThatDoesNotFitTheStreamIsRefusedWithAMessage) {
  Server server(1);
  const int fd = server.Connect();
  SendAll(fd, "time,bx,by,bz\n0,1,2,3\n0.1,1,2,3\n0.2,1,2,3\n0.3,1,2,3\n");
  ::shutdown(fd, SHUT_WR);
  ReceiveAll(fd);
  ::close(fd);
  server.Join();
  EXPECT_NE(server.log().find("f"), std::string::npos) << server.log();
  EXPECT_NE(server.log().find("error"), std::string::npos) << server.log();
}

TEST(StreamTest, OverLongLineIsRefused) {
  Server server(1);
  const int fd = server.Connect();
  std::thread send([&] {
    SendAll(fd, "time,bx,by,bz,f\n" + std::string(2u << 20, '1'));
    ::shutdown(fd, SHUT_WR);
  });
  ReceiveAll(fd);
  send.join();
  ::close(fd);
  server.Join();
  EXPECT_NE(server.log().find("error"), std::string::npos) << server.log();
}

}  // namespace
}  // namespace fluxtrim::core
