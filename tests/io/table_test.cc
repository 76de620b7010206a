// The in-memory columnar Table: case-insensitive look-up, channels added to
// a filled table, Append of chunks, Slice of row ranges.

#include "io/table.h"

#include <cmath>
#include <stdexcept>
#include <string>
#include <vector>

#include <gtest/gtest.h>

namespace fluxtrim::io {
namespace {

using Values = std::vector<double>;

Table TimeAndField(const Values& time, const Values& f) {
  Table t({{"time", "s", ""}, {"F", "nT", "scalar field"}});
  t.Column("time") = time;
  t.Column("f") = f;
  return t;
}

TEST(EqualsIgnoreCase, ComparesAsciiLettersWithoutCase) {
  EXPECT_TRUE(EqualsIgnoreCase("Heading", "hEADING"));
  EXPECT_TRUE(EqualsIgnoreCase("", ""));
  EXPECT_FALSE(EqualsIgnoreCase("bx", "by"));
  EXPECT_FALSE(EqualsIgnoreCase("bx", "bx "));
  // Only ASCII letters fold: '[' (0x5B) is not '{' (0x7B).
  EXPECT_FALSE(EqualsIgnoreCase("[", "{"));
}

TEST(Table, FindsChannelsCaseInsensitively) {
  const Table t = TimeAndField({0, 1}, {5, 6});
  EXPECT_EQ(t.Find("TIME"), 0);
  EXPECT_EQ(t.Find("f"), 1);
  EXPECT_EQ(t.Find("bx"), -1);
  EXPECT_TRUE(t.Has("Time"));
  EXPECT_FALSE(t.Has("tim"));
  EXPECT_EQ(t.Column("F"), (Values{5, 6}));
  EXPECT_EQ(t.channel(1).info.name, "F");  // the spelling is kept
}

TEST(Table, ColumnOfAMissingChannelThrowsNamingIt) {
  const Table t = TimeAndField({0}, {1});
  try {
    t.Column("bz");
    FAIL() << "expected std::out_of_range";
  } catch (const std::out_of_range& e) {
    EXPECT_NE(std::string(e.what()).find("'bz'"), std::string::npos);
  }
}

TEST(Table, AddChannelFillsExistingRowsWithNanAndRefusesRepeats) {
  Table t = TimeAndField({0, 1, 2}, {1, 2, 3});
  Channel& added = t.AddChannel({"bx", "nT", ""});
  ASSERT_EQ(added.values.size(), 3u);
  for (double v : added.values) EXPECT_TRUE(std::isnan(v));
  EXPECT_EQ(t.cols(), 3u);
  EXPECT_EQ(t.rows(), 3u);
  EXPECT_THROW(t.AddChannel({"BX", "", ""}), std::invalid_argument);
  EXPECT_EQ(t.cols(), 3u);
}

TEST(Table, SchemaListsTheChannelsInOrder) {
  const Table t = TimeAndField({0}, {1});
  const std::vector<ChannelInfo> schema = t.Schema();
  ASSERT_EQ(schema.size(), 2u);
  EXPECT_EQ(schema[0].name, "time");
  EXPECT_EQ(schema[1].unit, "nT");
  EXPECT_EQ(schema[1].long_name, "scalar field");
}

TEST(Table, AppendAddsTheRowsOfAChunkWithTheSameSchema) {
  Table t = TimeAndField({0, 1}, {10, 11});
  Table chunk({{"TIME", "", ""}, {"f", "", ""}});  // names match ignoring case
  chunk.Column("time") = {2, 3, 4};
  chunk.Column("f") = {12, 13, 14};
  t.Append(chunk);
  EXPECT_EQ(t.rows(), 5u);
  EXPECT_EQ(t.Column("time"), (Values{0, 1, 2, 3, 4}));
  EXPECT_EQ(t.Column("f"), (Values{10, 11, 12, 13, 14}));
}

TEST(Table, AppendRefusesAnotherSchema) {
  Table t = TimeAndField({0}, {1});
  Table other_names({{"time", "", ""}, {"g", "", ""}});
  EXPECT_THROW(t.Append(other_names), std::invalid_argument);
  Table other_count({{"time", "", ""}});
  EXPECT_THROW(t.Append(other_count), std::invalid_argument);
  Table other_order({{"f", "", ""}, {"time", "", ""}});
  EXPECT_THROW(t.Append(other_order), std::invalid_argument);
  EXPECT_EQ(t.rows(), 1u);
}

TEST(Table, SliceKeepsTheHalfOpenRange) {
  Table t = TimeAndField({0, 1, 2, 3, 4}, {10, 11, 12, 13, 14});
  t.Slice(1, 4);
  EXPECT_EQ(t.Column("time"), (Values{1, 2, 3}));
  EXPECT_EQ(t.Column("f"), (Values{11, 12, 13}));
}

TEST(Table, SliceClampsRangesBeyondTheEnd) {
  Table t = TimeAndField({0, 1, 2}, {10, 11, 12});
  t.Slice(1, 100);
  EXPECT_EQ(t.Column("time"), (Values{1, 2}));
  t.Slice(5, 7);
  EXPECT_EQ(t.rows(), 0u);
  EXPECT_EQ(t.cols(), 2u);
}

TEST(Table, SliceWithBeginAfterEndLeavesNoRows) {
  Table t = TimeAndField({0, 1, 2}, {10, 11, 12});
  t.Slice(2, 1);
  EXPECT_EQ(t.rows(), 0u);
}

TEST(Table, ClearRowsKeepsTheChannels) {
  Table t = TimeAndField({0, 1}, {1, 2});
  t.ClearRows();
  EXPECT_EQ(t.rows(), 0u);
  EXPECT_EQ(t.cols(), 2u);
  EXPECT_TRUE(t.Has("f"));
}

TEST(Table, TimeChannelDefaultsToTime) {
  Table t;
  EXPECT_EQ(t.time_channel(), "time");
  EXPECT_EQ(t.rows(), 0u);
  t.set_time_channel("gps_time");
  EXPECT_EQ(t.time_channel(), "gps_time");
}

}  // namespace
}  // namespace fluxtrim::io
