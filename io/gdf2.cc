#include "io/gdf2.h"

#include "io/error.h"

// Placeholder so that other parts link; the full reader and writer follow.
namespace fluxtrim::io {

struct Gdf2Reader::Impl {};

Gdf2Definition ParseGdf2Definition(std::istream&, const std::string& name) {
  throw InputError(name, 0, 0, "ASEG-GDF2 reading is not implemented yet");
}

Gdf2Reader::Gdf2Reader(std::istream&, const std::string& dfn_name,
                       std::istream&, const std::string&, const ReadOptions&) {
  throw InputError(dfn_name, 0, 0, "ASEG-GDF2 reading is not implemented yet");
}
Gdf2Reader::Gdf2Reader(const std::string& dfn_path, const std::string&,
                       const ReadOptions&) {
  throw InputError(dfn_path, 0, 0, "ASEG-GDF2 reading is not implemented yet");
}
Gdf2Reader::~Gdf2Reader() = default;
const std::vector<ChannelInfo>& Gdf2Reader::channels() const {
  static const std::vector<ChannelInfo> kNone;
  return kNone;
}
std::size_t Gdf2Reader::ReadChunk(Table*, std::size_t) { return 0; }
const std::string& Gdf2Reader::path() const {
  static const std::string kNone;
  return kNone;
}

const Gdf2Definition& Gdf2Reader::definition() const {
  static const Gdf2Definition kNone;
  return kNone;
}
const std::vector<std::string>& Gdf2Reader::skipped_text_fields() const {
  static const std::vector<std::string> kNone;
  return kNone;
}
std::size_t Gdf2Reader::skipped_lines() const { return 0; }

std::unique_ptr<RecordingReader> OpenGdf2Reader(const std::string& path,
                                                const ReadOptions&) {
  throw InputError(path, 0, 0, "ASEG-GDF2 reading is not implemented yet");
}

std::unique_ptr<RecordingWriter> CreateGdf2Writer(
    const std::string& path, const std::vector<ChannelInfo>&,
    const WriteOptions&) {
  throw InputError(path, 0, 0, "ASEG-GDF2 writing is not implemented yet");
}

}  // namespace fluxtrim::io
