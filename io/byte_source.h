#pragma once
// Where the chunked readers (csv.h, frames.h) get their bytes from: a file, a
// file descriptor (standard input, a pipe, a socket) or a std::istream.
//
// Read() blocks only until at least one byte is there, never until a whole
// buffer is full, and Ready() says whether a Read() would return at once.
// That lets a reader hand the rows it has to a real-time consumer instead of
// waiting for the next megabyte of a pipe.

#include <cstddef>
#include <cstdint>
#include <istream>
#include <memory>
#include <string>

namespace fluxtrim::io {

class ByteSource {
 public:
  virtual ~ByteSource() = default;
  // Reads up to n bytes into buf; blocks until at least one byte is
  // available or the end is reached. Returns 0 only at the end. Throws
  // std::runtime_error on an I/O error.
  virtual std::size_t Read(char* buf, std::size_t n) = 0;
  // True when Read() would not block (data waiting, or the end reached).
  virtual bool Ready() = 0;
};

// Reads a file descriptor with read(2); Ready() asks poll(2). Owns (closes)
// the descriptor when `owned`.
class FdSource : public ByteSource {
 public:
  FdSource(int fd, bool owned) : fd_(fd), owned_(owned) {}
  ~FdSource() override;
  FdSource(const FdSource&) = delete;
  FdSource& operator=(const FdSource&) = delete;

  std::size_t Read(char* buf, std::size_t n) override;
  bool Ready() override;

 private:
  int fd_;
  bool owned_;
};

// Reads a std::istream that outlives the source, through its streambuf.
// Takes what in_avail() promises, else one byte (which makes a buffered
// streambuf fetch more), so it never waits for more than the next byte.
class IstreamSource : public ByteSource {
 public:
  explicit IstreamSource(std::istream& in) : in_(in) {}
  std::size_t Read(char* buf, std::size_t n) override;
  bool Ready() override;

 private:
  std::istream& in_;
};

// A growable window onto a ByteSource: data() .. data()+size() are bytes read
// but not yet consumed; offset() is the stream position of data()[0].
class InputBuffer {
 public:
  // read_size: most bytes asked of the source per Fill() (the buffer grows
  // past it only for a line or message longer than that).
  explicit InputBuffer(std::unique_ptr<ByteSource> source,
                       std::size_t read_size = std::size_t{1} << 20);

  const char* data() const { return buf_.get() + begin_; }
  std::size_t size() const { return end_ - begin_; }
  std::uint64_t offset() const { return offset_; }
  bool at_end() const { return at_end_; }

  void Consume(std::size_t n) {
    begin_ += n;
    offset_ += n;
  }
  // Appends at least one more byte (blocking as ByteSource::Read does),
  // keeping the unconsumed bytes; data() may move. Returns false at the end
  // of the input. Throws std::length_error when keeping more than max_keep
  // unconsumed bytes would be needed.
  bool Fill(std::size_t max_keep);
  // True when Fill() would not block.
  bool Ready() { return at_end_ || source_->Ready(); }

 private:
  std::unique_ptr<ByteSource> source_;
  std::size_t read_size_;
  // Bytes asked per Read(): starts small (a short stream or a fuzzer input
  // costs little) and doubles up to read_size_ while reads come back full.
  std::size_t step_;
  std::unique_ptr<char[]> buf_;
  std::size_t capacity_ = 0;
  std::size_t begin_ = 0;
  std::size_t end_ = 0;
  std::uint64_t offset_ = 0;
  bool at_end_ = false;
};

// Opens `path` for reading ("-" is standard input). Throws InputError
// naming the path and the system's reason when it cannot be opened.
std::unique_ptr<ByteSource> OpenByteSource(const std::string& path);

}  // namespace fluxtrim::io
