#pragma once
// RecordingReader / RecordingWriter over a Table in memory, so that code
// written for files runs unchanged on data already read.

#include <string>

#include "io/recording.h"
#include "io/table.h"

namespace fluxtrim::io {

class TableReader : public RecordingReader {
 public:
  // Keeps a reference: table must outlive the reader.
  TableReader(const Table& table, std::string name);
  const std::vector<ChannelInfo>& channels() const override { return schema_; }
  std::size_t ReadChunk(Table* chunk, std::size_t max_rows) override;
  const std::string& path() const override { return name_; }

 private:
  const Table& table_;
  std::string name_;
  std::vector<ChannelInfo> schema_;
  std::size_t next_ = 0;
};

class TableWriter : public RecordingWriter {
 public:
  explicit TableWriter(const std::vector<ChannelInfo>& schema) : table_(schema) {}
  void Write(const Table& chunk) override { table_.Append(chunk); }
  void Close() override {}
  Table& table() { return table_; }

 private:
  Table table_;
};

}  // namespace fluxtrim::io
