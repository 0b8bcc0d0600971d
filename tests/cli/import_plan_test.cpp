#include "import_plan.h"

#include <fmt/format.h>
#include <gtest/gtest.h>

#include <string>
#include <vector>

namespace lyapcast::cli {
namespace {

using Names = std::vector<std::string>;
const Names kChannels{"flow", "dtemp_h", "dtemp_v"};
constexpr std::int64_t kStartUs = 1'767'225'600'000'000;  // 2026-01-01T00:00:00Z

ImportPlan Plan(const Names& header, const ImportOptions& options = {}) {
  auto p = PlanImport("loop-a", header, kChannels, options);
  EXPECT_TRUE(p.ok()) << p.status().message();
  return p.ok() ? *p : ImportPlan{};
}

std::string PlanError(const Names& header, const ImportOptions& options = {}) {
  auto p = PlanImport("loop-a", header, kChannels, options);
  EXPECT_FALSE(p.ok());
  EXPECT_EQ(p.status().code(), StatusCode::kInvalidArgument);
  return p.status().message();
}

std::int64_t Us(std::string_view text, TimeFormat format) {
  auto t = ParseTimeCell(text, format);
  EXPECT_TRUE(t.ok()) << text << ": " << t.status().message();
  return t.ok() ? EpochMicros(*t) : 0;
}

TEST(ParseTimeCell, EpochNumbersAreReadExactlyToTheMicrosecond) {
  EXPECT_EQ(Us("1767225600", TimeFormat::kAuto), kStartUs);
  EXPECT_EQ(Us(" 1767225600.123456 ", TimeFormat::kAuto), kStartUs + 123456);
  EXPECT_EQ(Us("1767225600.0000005", TimeFormat::kEpochSeconds), kStartUs + 1);  // half rounds away from zero
  EXPECT_EQ(Us("1767225600.0000004", TimeFormat::kEpochSeconds), kStartUs);
  EXPECT_EQ(Us("1.7672256001e9", TimeFormat::kEpochSeconds), kStartUs + 100'000);
  EXPECT_EQ(Us("+1767225600.5", TimeFormat::kAuto), kStartUs + 500'000);
  EXPECT_EQ(Us("-1.5", TimeFormat::kEpochSeconds), -1'500'000);
  EXPECT_EQ(Us("1767225600250", TimeFormat::kEpochMillis), kStartUs + 250'000);
  EXPECT_EQ(Us("1767225600250.5", TimeFormat::kEpochMillis), kStartUs + 250'500);
  EXPECT_EQ(Us("0", TimeFormat::kEpochMillis), 0);
}

TEST(ParseTimeCell, Rfc3339WithOffsetsAndFractions) {
  EXPECT_EQ(Us("2026-01-01T00:00:00Z", TimeFormat::kAuto), kStartUs);
  EXPECT_EQ(Us("2026-01-01T01:00:00.25+01:00", TimeFormat::kAuto), kStartUs + 250'000);
  EXPECT_EQ(Us("2025-12-31 19:00:00.000001-05:00", TimeFormat::kRfc3339), kStartUs + 1);
}

TEST(ParseTimeCell, ErrorsSayWhatWasExpected) {
  auto t = ParseTimeCell("2026-01-01T00:00:00", TimeFormat::kAuto);
  ASSERT_FALSE(t.ok());
  EXPECT_NE(t.status().message().find("'2026-01-01T00:00:00' has no UTC offset: an RFC 3339 time ends in Z or +hh:mm "
                                      "(e.g. 2026-01-01T00:00:00Z)"),
            std::string::npos)
      << t.status().message();
  t = ParseTimeCell("2026-01-01 00:00:00.5", TimeFormat::kAuto);
  ASSERT_FALSE(t.ok());
  EXPECT_EQ(t.status().message(),
            "'2026-01-01 00:00:00.5' has no UTC offset: an RFC 3339 time ends in Z or +hh:mm "
            "(e.g. 2026-01-01 00:00:00.5Z)");
  t = ParseTimeCell("yesterday", TimeFormat::kAuto);
  ASSERT_FALSE(t.ok());
  EXPECT_NE(t.status().message().find("not an RFC 3339 time"), std::string::npos) << t.status().message();
  EXPECT_NE(t.status().message().find("or epoch seconds such as 1767225600.25"), std::string::npos);
  t = ParseTimeCell("2026-01-01T00:00:00Z", TimeFormat::kEpochSeconds);
  ASSERT_FALSE(t.ok());
  EXPECT_NE(t.status().message().find("is not epoch seconds"), std::string::npos) << t.status().message();
  t = ParseTimeCell("1767225600", TimeFormat::kRfc3339);
  EXPECT_FALSE(t.ok());
  t = ParseTimeCell("1e30", TimeFormat::kAuto);
  ASSERT_FALSE(t.ok());
  EXPECT_NE(t.status().message().find("outside years 0001..9999"), std::string::npos) << t.status().message();
  t = ParseTimeCell("99999999999999", TimeFormat::kEpochSeconds);
  ASSERT_FALSE(t.ok());
  EXPECT_NE(t.status().message().find("outside years 0001..9999"), std::string::npos) << t.status().message();
  for (const char* bad : {"", "-", ".", "1.2.3", "12abc", "nan", "inf", "1e"}) {
    EXPECT_FALSE(ParseTimeCell(bad, TimeFormat::kEpochSeconds).ok()) << bad;
  }
  EXPECT_FALSE(ParseTimeFormat("iso").ok());
  EXPECT_EQ(*ParseTimeFormat("epoch-ms"), TimeFormat::kEpochMillis);
}

TEST(EpochMicrosText, ExactMicroseconds) {
  EXPECT_EQ(EpochMicrosText(DataTimeFromMicros(kStartUs + 250'000)), "1767225600.250000");
  EXPECT_EQ(EpochMicrosText(DataTimeFromMicros(-1'500'000)), "-1.500000");
}

TEST(PlanImport, MapsRenamedColumnsInAnyOrderAndIgnoresTheRest) {
  ImportOptions o;
  o.maps = {"dT vert=dtemp_v", "FT-101=flow"};
  const ImportPlan p = Plan({" Quality ", "dT vert", "Timestamp", "dtemp_h", "FT-101"}, o);
  EXPECT_EQ(p.time_column, 2u);
  ASSERT_EQ(p.column_of.size(), 3u);
  EXPECT_EQ(p.column_of[0], 4u);  // flow
  EXPECT_EQ(p.column_of[1], 3u);  // dtemp_h by name
  EXPECT_EQ(p.column_of[2], 1u);  // dtemp_v
  EXPECT_EQ(p.ignored, (std::vector<std::size_t>{0}));
  EXPECT_EQ(p.DescribeIgnored(), "'Quality' (1)");
  EXPECT_EQ(p.Describe(),
            "time <- 'Timestamp' (column 3, auto); flow <- 'FT-101' (5); dtemp_h <- 'dtemp_h' (4); "
            "dtemp_v <- 'dT vert' (2)");
}

TEST(PlanImport, MapMatchesCaseInsensitivelyWhenUnambiguousAndSplitsAtTheLastEquals) {
  ImportOptions o;
  o.maps = {"a=b=flow"};
  o.time_column = "WHEN";
  const ImportPlan p = Plan({"when", "A=B"}, o);
  EXPECT_EQ(p.time_column, 0u);
  EXPECT_EQ(p.column_of[0], 1u);
  EXPECT_FALSE(p.column_of[1].has_value());
  EXPECT_NE(p.Describe().find("dtemp_h: no column (missing in every row)"), std::string::npos);
}

TEST(PlanImport, ChannelWithoutColumnHintsAtAColumnInAnotherCase) {
  const ImportPlan p = Plan({"time", "Flow", "dtemp_h"});
  EXPECT_NE(p.Describe().find("flow: no column (missing in every row; --map 'Flow=flow'?)"), std::string::npos)
      << p.Describe();
}

TEST(PlanImport, UsageErrorsNameTheOptionAndListTheHeaderOrChannels) {
  EXPECT_NE(PlanError({"when", "flow"}).find("no time column"), std::string::npos);
  EXPECT_NE(PlanError({"when", "flow"}).find("the header: 'when' (1), 'flow' (2)"), std::string::npos);
  EXPECT_NE(PlanError({"time", "T", "flow"}).find("several columns could hold the time"), std::string::npos);
  ImportOptions o;
  o.maps = {"x=flow"};
  EXPECT_NE(PlanError({"t", "a"}, o).find("--map 'x=flow': no column named 'x'; the header: 't' (1), 'a' (2)"),
            std::string::npos);
  o.maps = {"a=flux"};
  EXPECT_NE(PlanError({"t", "a"}, o).find("has no channel 'flux'; its channels: flow, dtemp_h, dtemp_v"),
            std::string::npos);
  o.maps = {"a"};
  EXPECT_NE(PlanError({"t", "a"}, o).find("expected COLUMN=CHANNEL"), std::string::npos);
  o.maps = {"t=flow"};
  EXPECT_NE(PlanError({"t", "a"}, o).find("is the time column"), std::string::npos);
  o.maps = {"a=flow", "b=flow"};
  EXPECT_NE(PlanError({"t", "a", "b"}, o).find("channel flow would be fed by two columns"), std::string::npos);
  o.maps = {"a=flow", "a=dtemp_h"};
  EXPECT_NE(PlanError({"t", "a"}, o).find("is mapped twice"), std::string::npos);
  o.maps = {"a=flow"};
  EXPECT_NE(PlanError({"t", "a", "a"}, o).find("2 columns named 'a'"), std::string::npos);
  EXPECT_NE(PlanError({"t", "flow", "flow"}).find("two columns named 'flow'"), std::string::npos);
  EXPECT_NE(PlanError({"t", "a", "b"}).find("no column feeds a channel of feed loop-a"), std::string::npos);
  ImportOptions s;
  s.scales = {"flux=2"};
  EXPECT_NE(PlanError({"t", "flow"}, s).find("has no channel 'flux'"), std::string::npos);
  s.scales = {"flow=0"};
  EXPECT_NE(PlanError({"t", "flow"}, s).find("finite number other than 0"), std::string::npos);
  s.scales = {"flow=abc"};
  EXPECT_NE(PlanError({"t", "flow"}, s).find("finite number other than 0"), std::string::npos);
  s.scales = {"flow=2", "flow=3"};
  EXPECT_NE(PlanError({"t", "flow"}, s).find("scaled twice"), std::string::npos);
  s.scales = {"dtemp_h=2"};
  EXPECT_NE(PlanError({"t", "flow"}, s).find("no column feeds channel dtemp_h"), std::string::npos);
}

TEST(PlanImport, ColumnNamedLikeAChannelThatAMapAlreadyFeedsIsIgnored) {
  ImportOptions o;
  o.maps = {"FT-101=flow"};
  const ImportPlan p = Plan({"t", "flow", "FT-101"}, o);
  EXPECT_EQ(p.column_of[0], 2u);
  EXPECT_EQ(p.ignored, (std::vector<std::size_t>{1}));
}

TEST(ConvertRow, ChannelOrderComesFromTheFeedAndEmptyCellsAreMissing) {
  ImportOptions o;
  o.maps = {"V=dtemp_v", "F=flow"};
  const ImportPlan p = Plan({"V", "time", "F", "note"}, o);
  ImportRow r = ConvertRow(p, {" -0.4 ", "2026-01-01T00:00:00.25Z", "+0.31", "anything"});
  ASSERT_EQ(r.kind, ImportRow::Kind::kSample) << r.message;
  EXPECT_EQ(r.line, "loop-a,1767225600.250000,0.31,,-0.4");
  EXPECT_EQ(EpochMicros(r.t), kStartUs + 250'000);
  r = ConvertRow(p, {"", "1767225600.5", "1e-3", ""});
  ASSERT_EQ(r.kind, ImportRow::Kind::kSample) << r.message;
  EXPECT_EQ(r.line, "loop-a,1767225600.500000,0.001,,");
}

TEST(ConvertRow, ValuesRoundTripExactlyAndScale) {
  ImportOptions o;
  o.scales = {"flow=0.001"};
  const ImportPlan p = Plan({"t", "flow", "dtemp_h"}, o);
  const ImportRow r = ConvertRow(p, {"1767225600", "1234.5", "0.1"});
  ASSERT_EQ(r.kind, ImportRow::Kind::kSample) << r.message;
  EXPECT_EQ(r.line, fmt::format("loop-a,1767225600.000000,{},0.1,", 1234.5 * 0.001));
  const ImportRow exact = ConvertRow(Plan({"t", "flow"}), {"1767225600", "0.30000000000000004"});
  EXPECT_EQ(exact.line, "loop-a,1767225600.000000,0.30000000000000004,,");
}

TEST(ConvertRow, BlankRowsAreSkipped) {
  const ImportPlan p = Plan({"t", "flow", "dtemp_h"});
  EXPECT_EQ(ConvertRow(p, {""}).kind, ImportRow::Kind::kBlank);
  EXPECT_EQ(ConvertRow(p, {" ", "", "\t"}).kind, ImportRow::Kind::kBlank);
}

TEST(ConvertRow, RejectionsCarryTheDaemonsCodesAndNameTheColumn) {
  ImportOptions o;
  o.scales = {"flow=1e300"};
  const ImportPlan p = Plan({"t", "flow", "dtemp_h"}, o);
  const auto code = [&](std::vector<std::string> fields, const char* want, const char* text) {
    const ImportRow r = ConvertRow(p, fields);
    ASSERT_EQ(r.kind, ImportRow::Kind::kRejected) << fields[0];
    EXPECT_EQ(r.code, want) << r.message;
    EXPECT_NE(r.message.find(text), std::string::npos) << r.message;
  };
  code({"1767225600", "1"}, "field-count", "2 fields where the header has 3 columns");
  code({"1767225600", "1", "2", "3"}, "field-count", "a value in field 4 has no column");
  code({"", "1", "2"}, "bad-time", "column 't' (1) is empty");
  code({"yesterday", "1", "2"}, "bad-time", "column 't' (1): 'yesterday' is not an RFC 3339 time");
  code({"1767225600", "abc", "2"}, "not-a-number", "column 'flow' (2, channel flow): 'abc' is not a number");
  code({"1767225600", "1", "1,5"}, "not-a-number", "a decimal comma?");
  code({"1767225600", "1", "1e999"}, "not-a-number", "out of the range");
  code({"1767225600", "nan", "2"}, "non-finite", "'nan' is not a finite number");
  code({"1767225600", "1e10", "2"}, "non-finite", "x 1e+300 is not a finite number");
  code({"1767225600", "", " "}, "no-values", "every column that feeds a channel is empty");
}

}  // namespace
}  // namespace lyapcast::cli
