#include "io/frames.h"

#include <algorithm>
#include <cerrno>
#include <charconv>
#include <cmath>
#include <cstring>
#include <fstream>
#include <iostream>
#include <limits>
#include <map>
#include <stdexcept>
#include <utility>

#include <google/protobuf/stubs/logging.h>

#include "io/channel_map.h"
#include "io/error.h"
#include "proto/recording.pb.h"

namespace fluxtrim::io {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr std::size_t kMaxVarintBytes = 10;  // a 64-bit base-128 varint
constexpr std::size_t kReserveRows = 1 << 16;

std::string FormatDouble(double v) {
  char buf[32];
  const auto r = std::to_chars(buf, buf + sizeof buf, v);
  return std::string(buf, r.ptr);
}

}  // namespace

// ---------------------------------------------------------------- reader

FramesReader::FramesReader(const std::string& path, const ReadOptions& options)
    : FramesReader(OpenByteSource(path), path == "-" ? "<stdin>" : path,
                   options) {}

FramesReader::FramesReader(std::istream& in, std::string name,
                           const ReadOptions& options)
    : FramesReader(std::make_unique<IstreamSource>(in), std::move(name),
                   options) {}

FramesReader::FramesReader(std::unique_ptr<ByteSource> source,
                           std::string name, const ReadOptions& options)
    : name_(std::move(name)),
      options_(options),
      input_(std::move(source)),
      frame_(std::make_unique<proto::Frame>()) {
  ReadHeader();
}

FramesReader::~FramesReader() = default;

std::string FramesReader::Place() const {
  return "frame " + std::to_string(message_index_) + " at byte offset " +
         std::to_string(message_offset_);
}

void FramesReader::Fail(const std::string& message) const {
  throw InputError(name_, Place(), message);
}

FramesReader::Status FramesReader::NextMessage(bool block) {
  // Room for the largest message accepted plus its length prefix.
  // protobuf parses at most INT_MAX bytes at once.
  const std::size_t limit = std::min<std::size_t>(
      options_.max_frame_bytes, std::numeric_limits<int>::max());
  const std::size_t max_keep = limit + kMaxVarintBytes;
  for (;;) {
    const auto* d = reinterpret_cast<const unsigned char*>(input_.data());
    const std::size_t n = input_.size();
    std::uint64_t length = 0;
    std::size_t prefix = 0;
    bool complete = false;
    while (prefix < n && prefix < kMaxVarintBytes) {
      const unsigned char byte = d[prefix];
      if (prefix == kMaxVarintBytes - 1 && byte > 1) break;  // > 64 bits
      length |= static_cast<std::uint64_t>(byte & 0x7f) << (7 * prefix);
      ++prefix;
      if ((byte & 0x80) == 0) {
        complete = true;
        break;
      }
    }
    if (!complete && (prefix == kMaxVarintBytes ||
                      (prefix < n && prefix == kMaxVarintBytes - 1))) {
      message_index_ = frame_index_;
      message_offset_ = input_.offset();
      Fail("malformed length prefix: expected a base-128 varint of at most "
           "10 bytes");
    }
    if (complete) {
      if (length > limit) {
        message_index_ = frame_index_;
        message_offset_ = input_.offset();
        Fail("declared length " + std::to_string(length) +
             " exceeds the limit " + std::to_string(limit) +
             " (corrupt length prefix, or raise the frame size limit)");
      }
      if (n - prefix >= length) {
        message_index_ = frame_index_++;
        message_offset_ = input_.offset();
        message_data_ = input_.data() + prefix;
        message_size_ = static_cast<std::size_t>(length);
        input_.Consume(prefix + message_size_);
        return Status::kMessage;
      }
    }
    if (input_.at_end()) {
      if (n == 0) return Status::kEnd;
      message_index_ = frame_index_;
      message_offset_ = input_.offset();
      if (!complete) {
        Fail("the recording is cut inside the length prefix (" +
             std::to_string(n) + " bytes at the end of the file)");
      }
      Fail("the recording is cut mid-frame: declared length " +
           std::to_string(length) + ", only " + std::to_string(n - prefix) +
           " bytes present");
    }
    if (!block && !input_.Ready()) return Status::kWouldBlock;
    try {
      input_.Fill(max_keep);
    } catch (const std::exception& e) {
      message_index_ = frame_index_;
      message_offset_ = input_.offset();
      Fail(e.what());
    }
  }
}

void FramesReader::ReadHeader() {
  if (NextMessage(true) == Status::kEnd) {
    throw InputError(name_, 0, 0,
                     "the file is empty: expected a RecordingHeader "
                     "(frame 0) with magic '" +
                         std::string(kFramesMagic) + "'");
  }
  proto::RecordingHeader header;
  bool parsed;
  {
    // Keeps protobuf from logging its own complaint (e.g. invalid UTF-8 in a
    // name) on stderr; the InputError below says what is wrong.
    google::protobuf::LogSilencer silence;
    parsed =
        header.ParseFromArray(message_data_, static_cast<int>(message_size_));
  }
  if (!parsed) {
    Fail("not a RecordingHeader message: expected a fluxtrim recording "
         "(.ftrec) starting with magic '" +
         std::string(kFramesMagic) + "'");
  }
  if (header.magic() != kFramesMagic) {
    std::string magic = header.magic().substr(0, 40);
    for (char& c : magic) {
      if (static_cast<unsigned char>(c) < 0x20 || c == 0x7f) c = '?';
    }
    Fail("wrong magic '" + magic + "': expected '" + kFramesMagic + "'");
  }
  if (header.version() != kFramesVersion) {
    Fail("format version " + std::to_string(header.version()) +
         " is not supported: expected version " +
         std::to_string(kFramesVersion));
  }
  if (header.channels_size() == 0) {
    Fail("the header lists no channels: expected at least 'time'");
  }
  std::vector<std::string> names;
  for (const proto::ChannelDescription& c : header.channels()) {
    if (c.name().empty()) {
      Fail("channel " + std::to_string(names.size() + 1) +
           " of the header has no name");
    }
    for (std::size_t k = 0; k < names.size(); ++k) {
      if (EqualsIgnoreCase(names[k], c.name())) {
        Fail("channel '" + c.name() + "' appears twice in the header "
             "(channels " + std::to_string(k + 1) + " and " +
             std::to_string(names.size() + 1) + ")");
      }
    }
    names.push_back(c.name());
  }
  // A header that names another time channel (time_channel: "t") has it
  // read as "time", unless --map says otherwise or "time" is also present.
  std::map<std::string, std::string> rename = options_.rename;
  const std::string& declared = header.time_channel();
  const auto is_time = [](const std::string& n) {
    return EqualsIgnoreCase(n, "time");
  };
  if (!declared.empty() && !is_time(declared) &&
      std::none_of(names.begin(), names.end(), is_time) &&
      std::none_of(rename.begin(), rename.end(),
                   [&](const auto& m) { return is_time(m.first); })) {
    if (std::none_of(names.begin(), names.end(), [&](const std::string& n) {
          return EqualsIgnoreCase(n, declared);
        })) {
      Fail("the header's time channel '" + declared +
           "' is not one of its channels (" + [&] {
             std::string all;
             for (const std::string& n : names) {
               all += (all.empty() ? "" : ", ") + n;
             }
             return all;
           }() + ")");
    }
    rename["time"] = declared;
  }
  std::vector<std::string> final_names;
  try {
    final_names = MapChannelNames(names, rename);
  } catch (const std::invalid_argument& e) {
    Fail(e.what());
  }
  for (int j = 0; j < header.channels_size(); ++j) {
    ChannelInfo info;
    info.name = final_names[static_cast<std::size_t>(j)];
    info.unit = header.channels(j).unit();
    info.long_name = header.channels(j).long_name();
    channels_.push_back(std::move(info));
  }
  try {
    CheckRequiredChannels(channels_, options_.required);
  } catch (const std::invalid_argument& e) {
    Fail(e.what());
  }
  for (std::size_t j = 0; j < channels_.size(); ++j) {
    if (EqualsIgnoreCase(channels_[j].name, "time")) time_index_ = j;
  }
  comment_ = header.comment();
  row_.assign(channels_.size(), kNaN);
}

void FramesReader::CheckSample(std::size_t r) {
  const std::size_t n = channels_.size();
  const double* v = frame_->values().data() + r * n;
  auto fail = [&](std::size_t c, const std::string& what) {
    throw InputError(name_,
                     Place() + ", sample " + std::to_string(r + 1) +
                         ", channel '" + channels_[c].name + "'",
                     what);
  };
  for (std::size_t c = 0; c < n; ++c) {
    double x = v[c];
    if (std::isinf(x)) {
      if (options_.non_finite == NonFinitePolicy::kReject) {
        fail(c, FormatDouble(x) +
                    " where a finite number is expected (--nonfinite gap "
                    "reads it as a missing sample)");
      }
      x = kNaN;
    }
    row_[c] = x;
  }
  const double t = row_[time_index_];
  if (std::isnan(t)) {
    fail(time_index_, "time is missing: every sample needs a time (s)");
  }
  if (have_last_time_ && !(t > last_time_) &&
      options_.time_order == TimeOrderPolicy::kReject) {
    if (t == last_time_) {
      fail(time_index_, "time " + FormatDouble(t) +
                            " repeats the previous sample's time (duplicate "
                            "sample): expected increasing times");
    }
    fail(time_index_, "time " + FormatDouble(t) +
                          " goes backwards (the previous sample has " +
                          FormatDouble(last_time_) +
                          "): expected increasing times");
  }
  have_last_time_ = true;
  last_time_ = t;
}

std::size_t FramesReader::ReadChunk(Table* chunk, std::size_t max_rows) {
  if (pending_error_) throw *pending_error_;
  chunk->ResetRows(channels_);
  if (ended_ || max_rows == 0) return 0;

  const std::size_t n = channels_.size();
  std::vector<std::vector<double>*> columns(n);
  for (std::size_t c = 0; c < n; ++c) {
    columns[c] = &chunk->channel(c).values;
    columns[c]->reserve(std::min(max_rows, kReserveRows));
  }
  std::size_t rows = 0;
  try {
    while (rows < max_rows) {
      if (next_sample_ < samples_) {
        CheckSample(next_sample_);
        ++next_sample_;
        for (std::size_t c = 0; c < n; ++c) columns[c]->push_back(row_[c]);
        ++rows;
        continue;
      }
      const Status status = NextMessage(rows == 0);
      if (status == Status::kWouldBlock) break;
      if (status == Status::kEnd) {
        ended_ = true;
        if (rows_read_ + rows == 0) {
          throw InputError(name_, "end of file at byte offset " +
                                      std::to_string(input_.offset()),
                           "the header is not followed by any samples: "
                           "expected at least one Frame");
        }
        break;
      }
      if (!frame_->ParseFromArray(message_data_,
                                  static_cast<int>(message_size_))) {
        Fail("not a valid Frame message (" + std::to_string(message_size_) +
             " bytes)");
      }
      const std::size_t count = static_cast<std::size_t>(frame_->values_size());
      if (count % n != 0) {
        Fail(std::to_string(count) + " values is not a whole number of "
             "samples: expected a multiple of the " + std::to_string(n) +
             " channels");
      }
      samples_ = count / n;
      next_sample_ = 0;
    }
  } catch (const InputError& e) {
    pending_error_ = std::make_unique<InputError>(e);
    if (rows == 0) throw;
  }
  rows_read_ += rows;
  return rows;
}

// ---------------------------------------------------------------- writer

namespace {

void CheckSchema(const std::vector<ChannelInfo>& schema) {
  for (std::size_t j = 0; j < schema.size(); ++j) {
    if (schema[j].name.empty()) {
      throw std::invalid_argument("channel " + std::to_string(j + 1) +
                                  " has no name");
    }
    for (std::size_t k = 0; k < j; ++k) {
      if (EqualsIgnoreCase(schema[k].name, schema[j].name)) {
        throw std::invalid_argument("channel '" + schema[j].name +
                                    "' is present twice");
      }
    }
  }
}

}  // namespace

FramesWriter::FramesWriter(const std::string& path,
                           const std::vector<ChannelInfo>& schema,
                           const WriteOptions& options)
    : name_(path == "-" ? "<stdout>" : path),
      out_(&std::cout),
      schema_(schema),
      frame_(std::make_unique<proto::Frame>()) {
  CheckSchema(schema_);
  if (path != "-") {
    auto file = std::make_unique<std::ofstream>(
        path, std::ios::binary | std::ios::trunc);
    if (!file->is_open()) {
      throw std::runtime_error(path + ": cannot create: " +
                               std::strerror(errno));
    }
    owned_ = std::move(file);
    out_ = owned_.get();
  }
  WriteHeader(options);
}

FramesWriter::FramesWriter(std::ostream& out, std::string name,
                           const std::vector<ChannelInfo>& schema,
                           const WriteOptions& options)
    : name_(std::move(name)),
      out_(&out),
      schema_(schema),
      frame_(std::make_unique<proto::Frame>()) {
  CheckSchema(schema_);
  WriteHeader(options);
}

FramesWriter::~FramesWriter() {
  if (closed_) return;
  try {
    Close();
  } catch (...) {
    // Destructors must not throw; Close() reports failures.
  }
}

void FramesWriter::WriteHeader(const WriteOptions& options) {
  proto::RecordingHeader header;
  header.set_magic(kFramesMagic);
  header.set_version(kFramesVersion);
  for (const ChannelInfo& info : schema_) {
    proto::ChannelDescription* c = header.add_channels();
    c->set_name(info.name);
    c->set_unit(info.unit);
    c->set_long_name(info.long_name);
    if (EqualsIgnoreCase(info.name, "time")) header.set_time_channel(info.name);
  }
  header.set_comment(options.comment);
  header.SerializeToString(&scratch_);
  WriteMessage(scratch_);
}

void FramesWriter::WriteMessage(const std::string& bytes) {
  char prefix[kMaxVarintBytes];
  std::size_t len = 0;
  std::uint64_t size = bytes.size();
  do {
    unsigned char byte = size & 0x7f;
    size >>= 7;
    if (size != 0) byte |= 0x80;
    prefix[len++] = static_cast<char>(byte);
  } while (size != 0);
  out_->write(prefix, static_cast<std::streamsize>(len));
  out_->write(bytes.data(), static_cast<std::streamsize>(bytes.size()));
  if (!*out_) throw std::runtime_error(name_ + ": write failed");
}

void FramesWriter::Write(const Table& chunk) {
  if (closed_) throw std::logic_error(name_ + ": Write after Close");
  const std::size_t n = schema_.size();
  if (chunk.cols() != n) {
    throw std::invalid_argument(name_ + ": chunk has " +
                                std::to_string(chunk.cols()) +
                                " channels, the writer " + std::to_string(n));
  }
  for (std::size_t c = 0; c < n; ++c) {
    if (!EqualsIgnoreCase(chunk.channel(c).info.name, schema_[c].name)) {
      throw std::invalid_argument(name_ + ": chunk channel '" +
                                  chunk.channel(c).info.name +
                                  "' where the writer has '" +
                                  schema_[c].name + "'");
    }
  }
  const std::size_t rows = chunk.rows();
  for (std::size_t begin = 0; begin < rows; begin += kMaxRowsPerFrame) {
    const std::size_t count = std::min(kMaxRowsPerFrame, rows - begin);
    auto* values = frame_->mutable_values();
    values->Resize(static_cast<int>(count * n), 0.0);
    double* out = values->mutable_data();
    for (std::size_t c = 0; c < n; ++c) {
      const double* in = chunk.channel(c).values.data() + begin;
      for (std::size_t r = 0; r < count; ++r) out[r * n + c] = in[r];
    }
    frame_->SerializeToString(&scratch_);
    WriteMessage(scratch_);
  }
}

void FramesWriter::Flush() {
  out_->flush();
  if (!*out_) throw std::runtime_error(name_ + ": write failed");
}

void FramesWriter::Close() {
  if (closed_) return;
  closed_ = true;
  out_->flush();
  if (auto* file = dynamic_cast<std::ofstream*>(owned_.get())) file->close();
  if (!*out_) throw std::runtime_error(name_ + ": write failed");
}

}  // namespace fluxtrim::io
