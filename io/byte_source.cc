#include "io/byte_source.h"

#include <fcntl.h>
#include <poll.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cstring>
#include <stdexcept>

#include "io/error.h"

namespace fluxtrim::io {
namespace {

// Bytes asked of a source by the first read (see InputBuffer::step_).
constexpr std::size_t kFirstReadBytes = std::size_t{16} << 10;

}  // namespace

FdSource::~FdSource() {
  if (owned_ && fd_ >= 0) ::close(fd_);
}

std::size_t FdSource::Read(char* buf, std::size_t n) {
  for (;;) {
    const ssize_t got = ::read(fd_, buf, n);
    if (got >= 0) return static_cast<std::size_t>(got);
    if (errno == EINTR) continue;
    if (errno == EAGAIN || errno == EWOULDBLOCK) {
      // A non-blocking descriptor: wait for data as a blocking one would.
      pollfd p{fd_, POLLIN, 0};
      ::poll(&p, 1, -1);
      continue;
    }
    throw std::runtime_error(std::string("read error: ") +
                             std::strerror(errno));
  }
}

bool FdSource::Ready() {
  pollfd p{fd_, POLLIN, 0};
  const int r = ::poll(&p, 1, 0);
  // Regular files always poll ready; errors and hang-ups make Read() return
  // at once too.
  return r != 0;
}

std::size_t IstreamSource::Read(char* buf, std::size_t n) {
  if (n == 0) return 0;
  std::streambuf* sb = in_.rdbuf();
  if (sb == nullptr) return 0;
  const std::streamsize avail = sb->in_avail();
  if (avail < 0) return 0;
  const std::streamsize want =
      avail > 0 ? std::min<std::streamsize>(avail,
                                            static_cast<std::streamsize>(n))
                : 1;
  const std::streamsize got = sb->sgetn(buf, want);
  return got > 0 ? static_cast<std::size_t>(got) : 0;
}

bool IstreamSource::Ready() {
  std::streambuf* sb = in_.rdbuf();
  return sb == nullptr || sb->in_avail() != 0;
}

InputBuffer::InputBuffer(std::unique_ptr<ByteSource> source,
                         std::size_t read_size)
    : source_(std::move(source)),
      read_size_(std::max<std::size_t>(read_size, 16)),
      step_(std::min(kFirstReadBytes, read_size_)) {}

bool InputBuffer::Fill(std::size_t max_keep) {
  if (at_end_) return false;
  const std::size_t kept = end_ - begin_;
  if (kept >= max_keep) {
    throw std::length_error("more than " + std::to_string(max_keep) +
                            " bytes would have to be held at once");
  }
  const std::size_t want = std::min(step_, max_keep - kept);
  if (capacity_ - end_ < want) {
    if (capacity_ >= kept + want) {
      if (kept > 0) std::memmove(buf_.get(), buf_.get() + begin_, kept);
    } else {
      const std::size_t capacity = std::max(kept + want, capacity_ * 2);
      std::unique_ptr<char[]> grown(new char[capacity]);
      if (kept > 0) std::memcpy(grown.get(), buf_.get() + begin_, kept);
      buf_ = std::move(grown);
      capacity_ = capacity;
    }
    begin_ = 0;
    end_ = kept;
  }
  const std::size_t room = capacity_ - end_;
  const std::size_t got = source_->Read(buf_.get() + end_, room);
  if (got == 0) {
    at_end_ = true;
    return false;
  }
  if (got == room && step_ < read_size_) step_ = std::min(2 * step_, read_size_);
  end_ += got;
  return true;
}

std::unique_ptr<ByteSource> OpenByteSource(const std::string& path) {
  if (path == "-") return std::make_unique<FdSource>(STDIN_FILENO, false);
  int fd;
  do {
    fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
  } while (fd < 0 && errno == EINTR);
  if (fd < 0) {
    throw InputError(path, 0, 0,
                     std::string("cannot open: ") + std::strerror(errno));
  }
  struct stat st;
  if (::fstat(fd, &st) == 0 && S_ISDIR(st.st_mode)) {
    ::close(fd);
    throw InputError(path, 0, 0, "is a directory, expected a recording file");
  }
#ifdef POSIX_FADV_SEQUENTIAL
  ::posix_fadvise(fd, 0, 0, POSIX_FADV_SEQUENTIAL);
#endif
  return std::make_unique<FdSource>(fd, true);
}

}  // namespace fluxtrim::io
