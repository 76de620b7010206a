// Linked into every test executable: gives each test process a private
// temporary directory, so that ::testing::TempDir() never hands two test
// processes (ctest -j runs one process per test) the same file name.
// GoogleTest reads TEST_TMPDIR on every TempDir() call; we set it before
// main() and remove the directory (with everything left in it) at exit.

#include <cstdlib>
#include <filesystem>
#include <string>
#include <system_error>

namespace {

class PrivateTmpDir {
 public:
  PrivateTmpDir() {
    const char* parent = std::getenv("TEST_TMPDIR");
    std::string pattern = (parent != nullptr && *parent != '\0') ? parent : "/tmp";
    pattern += "/fluxtrim_test_XXXXXX";
    if (mkdtemp(pattern.data()) == nullptr) return;  // keep the default
    dir_ = pattern;
    setenv("TEST_TMPDIR", dir_.c_str(), 1);
  }
  ~PrivateTmpDir() {
    if (dir_.empty() || std::getenv("FLUXTRIM_KEEP_TEST_TMPDIR") != nullptr) return;
    std::error_code ignored;
    std::filesystem::remove_all(dir_, ignored);
  }
  PrivateTmpDir(const PrivateTmpDir&) = delete;
  PrivateTmpDir& operator=(const PrivateTmpDir&) = delete;

 private:
  std::string dir_;
};

const PrivateTmpDir kPrivateTmpDir;

}  // namespace
