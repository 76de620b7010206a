#pragma once
// Real-time compensation of a stream: CSV lines (header first) or
// length-delimited protobuf frames in, the same format out, every input
// channel plus f_comp, f_interference and flags. One output per input, in
// order, each k samples late (the derivative half-width; see
// models/compensator.h); a slow reader blocks the writer (back-pressure),
// nothing is dropped; at end of input the last samples are flushed. The
// numbers are those of `apply` (the same core::ApplyChunked and
// models::Compensator).

#include <atomic>
#include <cstddef>
#include <functional>
#include <ostream>
#include <string>

#include "io/recording.h"
#include "proto/model.pb.h"
#include "src/core/adaptive.h"

namespace fluxtrim::core {

enum class StreamFormat { kAuto, kCsv, kFrames };

struct StreamOptions {
  StreamFormat format = StreamFormat::kAuto;
  io::ReadOptions read;             // --map, non-finite policy, frame limit
  std::size_t chunk_rows = 4096;    // at most this many samples per write
  std::size_t rate_check_rows = 16; // samples before the rate is checked
  // In-flight adaptation of the coefficients (core/adaptive.h), off by
  // default; off, the output is that of `apply` bit for bit. On, each
  // update is one line "<name>: adapt t=..." on adapt_log (when set).
  bool adapt = false;
  AdaptOptions adapt_options;
  std::ostream* adapt_log = nullptr;
};

// Decides the format from the first bytes of a stream: a length-delimited
// RecordingHeader carries the magic "fluxtrim-recording" within its first
// 24 bytes; anything else is CSV. Returns kAuto when the bytes cannot tell
// yet (too few and no newline).
StreamFormat DetectStreamFormat(const std::string& first_bytes, bool at_end);

// Serves one stream: reads in_fd until its end, writes to out_fd. `name`
// labels messages ("stdin", "client 127.0.0.1:40312"). Returns the samples
// delivered. On bad input or a model that does not fit the stream, every
// sample accepted before the fault is delivered, then io::InputError is
// thrown; a reader that went away gives std::runtime_error.
std::size_t ServeStream(const proto::CompensationModel& model, int in_fd,
                        int out_fd, const std::string& name,
                        const StreamOptions& options);

struct ListenOptions {
  std::string host = "127.0.0.1";
  int port = 0;                  // 0: any free port (reported by on_listen)
  // Stop after this many clients have been served (0: run until *stop).
  std::size_t max_clients = 0;
  std::function<void(int port)> on_listen;
};

// Accepts TCP clients, one thread each; each client's stream comes back on
// its own connection. A fault closes that client only, with a message on
// `log`; the others go on. Returns when *stop is set or max_clients have
// finished. Throws std::runtime_error when it cannot listen.
void ListenAndServe(const proto::CompensationModel& model,
                    const ListenOptions& listen, const StreamOptions& options,
                    std::atomic<bool>* stop, std::ostream& log);

}  // namespace fluxtrim::core
