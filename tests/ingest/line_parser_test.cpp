#include "ingest/line_parser.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstdint>
#include <random>
#include <string>
#include <vector>

namespace lyapcast {
namespace {

using Kind = ParsedLine::Kind;
using R = RejectReason;

constexpr DataTime kT0 = DataTimeFromMicros(1733097600LL * 1'000'000);  // 2024-12-02T00:00:00Z
constexpr WallTime kNow = WallTimeAtData(kT0 + 5 * kSecond);  // the server's wall clock in these tests
constexpr Micros kSkew = 10 * kSecond;

Config MakeConfig() {
  Config config;
  FeedConfig a;
  a.id = "loop-a";
  a.channels = {"flow", "dtemp_h", "dtemp_v"};
  FeedConfig b;
  b.id = "pump-2";
  b.channels = {"p"};
  FeedConfig wide;
  wide.id = "wide";
  for (int c = 0; c < kMaxChannels; ++c) wide.channels.push_back("c" + std::to_string(c));
  config.feeds = {a, b, wide};
  return config;
}

const Config& TestConfig() {
  static const Config config = MakeConfig();
  return config;
}

// One reply line: non-empty, no control characters.
void ExpectOneLineMessage(const ParsedLine& p) {
  ASSERT_EQ(p.kind, Kind::kReject);
  EXPECT_FALSE(p.message.empty());
  for (const char ch : p.message) {
    const auto b = static_cast<unsigned char>(ch);
    ASSERT_TRUE(b >= 0x20 && b != 0x7F) << "control byte in message: " << p.message;
  }
  EXPECT_LE(p.message.size(), 600u) << p.message;
}

std::string Describe(const ParsedLine& p) {
  switch (p.kind) {
    case Kind::kSample: return "sample";
    case Kind::kAuth: return "auth '" + p.token + "'";
    case Kind::kReject: return std::string(RejectCode(p.reason)) + ": " + p.message;
  }
  return "?";
}

// ---------------------------------------------------------------------------
// Rejections: every case asserts the exact reason and a message fragment.

struct BadCase {
  std::string line;
  RejectReason reason;
  std::string fragment;  // expected somewhere in the message
};

std::vector<BadCase> BadCases() {
  using namespace std::string_literals;
  const std::string ok_values = R"("values":{"flow":1})";
  return {
      // unknown-feed
      {"loop-b,1733097600,1,2,3", R::kUnknownFeed, "feed 'loop-b' is not configured (feeds: loop-a, pump-2, wide)"},
      {",1733097600,1,2,3", R::kUnknownFeed, "feed id is empty"},
      {"hello", R::kUnknownFeed, "'hello'"},
      {"l\xc3\xb6\xc3\xb6p,1733097600,1,2,3", R::kUnknownFeed, "'l\xc3\xb6\xc3\xb6p'"},  // valid UTF-8 passes
      {R"({"feed":"\u00e9\ud83d\ude00","t":1,"values":{"flow":1}})", R::kUnknownFeed, "'\xc3\xa9\xf0\x9f\x98\x80'"},
      {R"({"feed":"loop-b","t":1733097600,"values":{"flow":1}})", R::kUnknownFeed, "feed 'loop-b' is not configured"},
      // unknown-channel
      {R"({"feed":"loop-a","t":1733097600,"values":{"flw":1}})", R::kUnknownChannel,
       "channel 'flw' is not a channel of feed 'loop-a' (channels: flow, dtemp_h, dtemp_v)"},
      {R"({"feed":"pump-2","t":1733097600,"values":{"p":1,"flow":2}})", R::kUnknownChannel, "channel 'flow'"},
      // duplicate-channel
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":1,"flow":2}})", R::kDuplicateChannel,
       "channel 'flow' appears more than once"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":1,"fl\u006fw":null}})", R::kDuplicateChannel,
       "'flow'"},
      // duplicate-field
      {R"({"feed":"loop-a","t":1733097600,"t":1733097601,"values":{"flow":1}})", R::kDuplicateField,
       "field 't' appears more than once"},
      {R"({"feed":"loop-a","feed":"loop-a","t":1733097600,"values":{"flow":1}})", R::kDuplicateField, "'feed'"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":1},"values":{"flow":1}})", R::kDuplicateField,
       "'values'"},
      // missing-field
      {R"({"feed":"loop-a","values":{"flow":1}})", R::kMissingField, "missing field 't'"},
      {R"({"t":1733097600,"values":{"flow":1}})", R::kMissingField, "missing field 'feed'"},
      {R"({"feed":"loop-a","t":1733097600})", R::kMissingField, "missing field 'values'"},
      {"{}", R::kMissingField, "missing fields 'feed', 't', 'values'"},
      // unknown-field
      {R"({"feed":"loop-a","t":1733097600,"unit":"K","values":{"flow":1}})", R::kUnknownField,
       "unknown field 'unit' (allowed: feed, t, values)"},
      {R"({"Feed":"loop-a","t":1733097600,"values":{"flow":1}})", R::kUnknownField, "'Feed'"},
      // field-count
      {"loop-a,1733097600,1,2", R::kFieldCount,
       "expected 5 fields (feed, t, flow, dtemp_h, dtemp_v) for feed 'loop-a', got 4"},
      {"loop-a,1733097600,1,2,3,4", R::kFieldCount, "got 6"},
      {"loop-a,1733097600,1,2,3,", R::kFieldCount, "got 6"},
      {"loop-a", R::kFieldCount, "got 1"},
      {"wide,1733097600,1", R::kFieldCount, "expected 66 fields (feed, t, c0, c1"},
      {"", R::kFieldCount, "empty line"},
      {"   \t ", R::kFieldCount, "empty line"},
      {"\r", R::kFieldCount, "empty line"},
      // not-a-number
      {"loop-a,1733097600,1,abc,3", R::kNotANumber, "value of 'dtemp_h' is 'abc', not a number"},
      {"loop-a,1733097600,1.5x,2,3", R::kNotANumber, "value of 'flow' is '1.5x'"},
      {"loop-a,1733097600,0x10,2,3", R::kNotANumber, "'0x10'"},
      {"loop-a,1733097600,1 2,2,3", R::kNotANumber, "'1 2'"},
      {"loop-a,1733097600,--1,2,3", R::kNotANumber, "'--1'"},
      {"loop-a,1733097600,+-1,2,3", R::kNotANumber, "'+-1'"},
      {R"(loop-a,1733097600,"1.5",2,3)", R::kNotANumber, "quotes are not allowed"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"dtemp_h":"abc"}})", R::kNotANumber,
       "value of 'dtemp_h' is a string (\"abc\"), not a number"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":true}})", R::kNotANumber, "'flow' is true"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":{"v":1}}})", R::kNotANumber, "is an object"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":[1]}})", R::kNotANumber, "is an array"},
      // non-finite
      {"loop-a,1733097600,nan,2,3", R::kNonFinite, "value of 'flow' is 'nan', not a finite number"},
      {"loop-a,1733097600,1,-inf,3", R::kNonFinite, "'-inf'"},
      {"loop-a,1733097600,1,2,Infinity", R::kNonFinite, "'Infinity'"},
      {"loop-a,1733097600,1e999,2,3", R::kNonFinite, "'1e999', beyond the range of a double"},
      {"loop-a,1733097600,-1e400,2,3", R::kNonFinite, "beyond the range"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":1e999}})", R::kNonFinite,
       "value of 'flow' is '1e999', beyond the range of a double"},
      // no-values
      {"loop-a,1733097600,,,", R::kNoValues, "every channel field is empty"},
      {"loop-a,1733097600, , ,\t", R::kNoValues, "no values"},
      {R"({"feed":"loop-a","t":1733097600,"values":{}})", R::kNoValues, "every channel is absent or null"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":null,"dtemp_v":null}})", R::kNoValues,
       "channels of 'loop-a': flow, dtemp_h, dtemp_v"},
      // bad-time
      {"loop-a,yesterday,1,2,3", R::kBadTime,
       "t 'yesterday' is not an RFC 3339 time (too short); expected e.g. 2024-12-02T08:30:00.25Z or epoch seconds"},
      {"loop-a,,1,2,3", R::kBadTime, "t is empty"},
      {"loop-a,nan,1,2,3", R::kBadTime, "t 'nan' is not finite"},
      {"loop-a,inf,1,2,3", R::kBadTime, "not finite"},
      {"loop-a,1e999,1,2,3", R::kBadTime, "out of range"},
      {"loop-a,1e300,1,2,3", R::kBadTime, "outside years 0001..9999"},
      {"loop-a,1733097600x,1,2,3", R::kBadTime, "'1733097600x'"},
      {"loop-a,2024-13-02T00:00:00Z,1,2,3", R::kBadTime, "no such date"},
      {"loop-a,2024-12-02T00:00:00,1,2,3", R::kBadTime, "too short"},
      {"loop-a,2024-12-02T00:00:00.5,1,2,3", R::kBadTime, "missing time zone offset"},
      {R"({"feed":"loop-a","t":"tomorrow","values":{"flow":1}})", R::kBadTime, "t 'tomorrow'"},
      {R"({"feed":"loop-a","t":1e999,"values":{"flow":1}})", R::kBadTime, "t '1e999' is out of range"},
      {R"({"feed":"loop-a","t":-1e20,"values":{"flow":1}})", R::kBadTime, "outside years"},
      {R"({"feed":"loop-a","t":"NaN","values":{"flow":1}})", R::kBadTime, "not finite"},
      // future-time (now = t0 + 5 s, allowed skew 10 s)
      {"loop-a,1733097700,1,2,3", R::kFutureTime,
       "t 1733097700 (2024-12-02T00:01:40.000000Z) is 95s ahead of this server's clock (allowed skew 10s)"},
      {"loop-a,1733097615.5,1,2,3", R::kFutureTime, "is 10.5s ahead"},
      {R"({"feed":"loop-a","t":"2024-12-02T02:00:05+01:00","values":{"flow":1}})", R::kFutureTime,
       "is 1h ahead"},
      // bad-encoding
      {"\xff", R::kBadEncoding, "invalid UTF-8 at offset 0 (byte 0xff)"},
      {"loop-a,1733097600,1,2,3\xc3", R::kBadEncoding, "invalid UTF-8 at offset 23"},
      {"loop-a,1733097600,\xc0\xaf,2,3", R::kBadEncoding, "invalid UTF-8 at offset 18"},  // overlong
      {"loop-a,1733097600,\xed\xa0\x80,2,3", R::kBadEncoding, "invalid UTF-8"},          // surrogate
      {"loop-a,1733097600,\xf4\x90\x80\x80,2,3", R::kBadEncoding, "invalid UTF-8"},      // > U+10FFFF
      {"loop-a,1733097600,1\0,2,3"s, R::kBadEncoding, "control byte 0x00 at offset 19"},
      {"loop-a,1733097600,\x01,2,3", R::kBadEncoding, "control byte 0x01 at offset 18"},
      {"loop-a,1733097600,1,2,3\x7f", R::kBadEncoding, "control byte 0x7f"},
      {"loop-a,1733097600,1\r,2,3", R::kBadEncoding, "control byte 0x0d at offset 19"},
      {"loop-a,1733097600,1,2,3\r\r", R::kBadEncoding, "control byte 0x0d"},
      {"{\"feed\":\"loop-a\",\n\"t\":1733097600,\"values\":{\"flow\":1}}", R::kBadEncoding, "0x0a at offset 17"},
      {"\x1b[31mloop-a,1,2,3", R::kBadEncoding, "0x1b at offset 0"},
      {"\xff\x01", R::kBadEncoding, "offset 0"},  // the first problem is reported
      // bad-json
      {R"({"feed":"loop-a","t":1733097600)", R::kBadJson, "malformed JSON"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":1})", R::kBadJson, "malformed JSON"},
      {R"({"feed":"loop-a","t":17330)", R::kBadJson, "malformed JSON"},
      {R"({"feed":"loop-a)", R::kBadJson, "malformed JSON"},
      {"{", R::kBadJson, "malformed JSON"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":1}} x)", R::kBadJson, "malformed JSON"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":1}}})", R::kBadJson,
       "unexpected '}' after the closing '}'"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":1}}{"feed":"loop-a"})", R::kBadJson, "after the closing"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":1}},)", R::kBadJson, "malformed JSON"},
      {"[1,2]", R::kBadJson, "the line is an array, not a JSON object"},
      {R"([{"feed":"loop-a","t":1733097600,"values":{"flow":1}}])", R::kBadJson, "not a JSON object"},
      {R"({"feed":7,"t":1733097600,"values":{"flow":1}})", R::kBadJson,
       "field 'feed' is a number, expected a string"},
      {R"({"feed":"loop-a","t":{"s":1},"values":{"flow":1}})", R::kBadJson, "field 't' is an object"},
      {R"({"feed":"loop-a","t":true,"values":{"flow":1}})", R::kBadJson, "field 't' is a boolean"},
      {R"({"feed":"loop-a","t":null,"values":{"flow":1}})", R::kBadJson, "field 't' is null"},
      {R"({"feed":"loop-a","t":1733097600,"values":[1,2,3]})", R::kBadJson, "field 'values' is an array"},
      {R"({"feed":"loop-a","t":1733097600,"values":"flow=1"})", R::kBadJson, "field 'values' is a string"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":NaN}})", R::kBadJson, "malformed JSON"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":-Infinity}})", R::kBadJson, "not a valid JSON number"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":01}})", R::kBadJson, "'01', not a valid JSON number"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":1.}})", R::kBadJson, "not a valid JSON number"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":nul}})", R::kBadJson, "malformed JSON"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":1 "dtemp_h":2}})", R::kBadJson, "malformed JSON"},
      {R"({"feed":"loop-a" "t":1733097600,"values":{"flow":1}})", R::kBadJson, "malformed JSON"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":1,}})", R::kBadJson, "malformed JSON"},
      {R"({feed:"loop-a","t":1733097600,"values":{"flow":1}})", R::kBadJson, "malformed JSON"},
      {R"({"feed":"loop\q","t":1733097600,"values":{"flow":1}})", R::kBadJson, "malformed JSON"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":"\ud800"}})", R::kBadJson, "malformed JSON"},
      {"{\"feed\":\"loop-a\",\"t\":1733097600,\"values\":{\"flow\":\"a\tb\"}}", R::kBadJson, "malformed JSON"},
      {R"({"feed":"loop-a","t":01733097600,"values":{"flow":1}})", R::kBadJson, "not a valid JSON number"},
      // Malformed JSON anywhere outranks the semantic errors found before it.
      {R"({"unit":tru,"feed":"loop-a","t":1733097600,"values":{"flow":1}})", R::kBadJson, "malformed JSON"},
      {R"({"feed":"loop-a","t":1733097600,"t":[1,,2],"values":{"flow":1}})", R::kBadJson, "malformed JSON"},
      {R"({"feed":"loop-a","t":1733097600,"values":{"flow":"x","dtemp_h":[}})", R::kBadJson, "malformed JSON"},
      {R"({"x":1,"feed":"loop-a","t":1733097600,"values":{"flow":1}} ])", R::kBadJson, "malformed JSON"},
  };
}

TEST(LineParserTable, EveryBadLineHasItsExactReasonAndAnActionableMessage) {
  LineParser parser(TestConfig(), kSkew);
  int n = 0;
  for (const BadCase& c : BadCases()) {
    SCOPED_TRACE("line: " + c.line);
    const ParsedLine p = parser.Parse(c.line, kNow);
    ASSERT_EQ(p.kind, Kind::kReject) << Describe(p);
    EXPECT_EQ(RejectCode(p.reason), RejectCode(c.reason)) << p.message;
    EXPECT_NE(p.message.find(c.fragment), std::string::npos)
        << "message: " << p.message << "\nexpected fragment: " << c.fragment;
    ExpectOneLineMessage(p);
    ++n;
  }
  EXPECT_GE(n, 100);
}

TEST(LineParserTable, CoversEveryReasonTheParserProduces) {
  std::vector<bool> seen(kRejectReasonCount, false);
  for (const BadCase& c : BadCases()) seen[static_cast<int>(c.reason)] = true;
  for (const R r : {R::kUnknownFeed, R::kUnknownChannel, R::kDuplicateChannel, R::kDuplicateField,
                    R::kMissingField, R::kUnknownField, R::kFieldCount, R::kNotANumber, R::kNonFinite,
                    R::kNoValues, R::kBadTime, R::kFutureTime, R::kBadEncoding, R::kBadJson}) {
    EXPECT_TRUE(seen[static_cast<int>(r)]) << RejectCode(r);
  }
}

// ---------------------------------------------------------------------------
// Accepted lines: exact feed, time, values and mask.

constexpr double kMissing = std::numeric_limits<double>::quiet_NaN();

struct GoodCase {
  std::string line;
  std::uint32_t feed;
  DataTime t;
  std::vector<double> values;  // kMissing where missing
};

std::uint64_t MaskOf(const std::vector<double>& values) {
  std::uint64_t mask = 0;
  for (size_t c = 0; c < values.size(); ++c) {
    if (std::isnan(values[c])) mask |= std::uint64_t{1} << c;
  }
  return mask;
}

std::vector<GoodCase> GoodCases() {
  const DataTime t025 = kT0 + Micros(250'000);
  return {
      // CSV, epoch seconds
      {"loop-a,1733097600.25,0.31,1.2,-0.4", 0, t025, {0.31, 1.2, -0.4}},
      {"loop-a,1733097600,1,2,3", 0, kT0, {1, 2, 3}},
      {"loop-a,1.7330976e9,1,2,3", 0, kT0, {1, 2, 3}},
      {"loop-a,0,1,2,3", 0, DataTime{}, {1, 2, 3}},
      {"loop-a,-86400.5,1,2,3", 0, DataTimeFromMicros(-86'400'500'000), {1, 2, 3}},
      // CSV, RFC 3339 (with offsets and fractions)
      {"loop-a,2024-12-02T00:00:00.25Z,0.31,1.2,-0.4", 0, t025, {0.31, 1.2, -0.4}},
      {"loop-a,2024-12-02T01:00:00.25+01:00,1,2,3", 0, t025, {1, 2, 3}},
      {"loop-a,2024-12-01T19:30:00-04:30,1,2,3", 0, kT0, {1, 2, 3}},
      {"loop-a,2024-12-02 00:00:00z,1,2,3", 0, kT0, {1, 2, 3}},
      {R"(loop-a,"2024-12-02T00:00:00Z",1,2,3)", 0, kT0, {1, 2, 3}},
      // missing channels, blanks, CRLF, number spellings
      {"loop-a,1733097600,,2,", 0, kT0, {kMissing, 2, kMissing}},
      {"loop-a,1733097600,1,,3", 0, kT0, {1, kMissing, 3}},
      {" loop-a , 1733097600 , 1 ,\t2\t, 3 ", 0, kT0, {1, 2, 3}},
      {"loop-a,1733097600,1,2,3\r", 0, kT0, {1, 2, 3}},
      {"loop-a,1733097600,,,3\r", 0, kT0, {kMissing, kMissing, 3}},
      {"loop-a,1733097600,+1.5,1e3,-2.5E-3", 0, kT0, {1.5, 1000, -0.0025}},
      {"loop-a,1733097600,.5,5.,-0", 0, kT0, {0.5, 5, -0.0}},
      {"loop-a,1733097600,1e-400,1.7976931348623157e308,4.9e-324", 0, kT0, {0, 1.7976931348623157e308, 4.9e-324}},
      {R"("loop-a",1733097600,1,2,3)", 0, kT0, {1, 2, 3}},
      {"pump-2,1733097600,7", 1, kT0, {7}},
      {"loop-a,1733097615,1,2,3", 0, DataTimeAtWall(kNow) + kSkew, {1, 2, 3}},  // exactly at the allowed skew
      // NDJSON, epoch seconds and RFC 3339
      {R"({"feed":"loop-a","t":1733097600.25,"values":{"flow":0.31,"dtemp_h":1.2,"dtemp_v":-0.4}})", 0, t025,
       {0.31, 1.2, -0.4}},
      {R"({"feed":"loop-a","t":"2024-12-01T19:00:00.25-05:00","values":{"flow":1}})", 0, t025,
       {1, kMissing, kMissing}},
      {R"({"feed":"loop-a","t":"2024-12-02T00:00:00Z","values":{"flow":null,"dtemp_h":2}})", 0, kT0,
       {kMissing, 2, kMissing}},
      {R"({"values":{"dtemp_v":3,"flow":1},"t":1733097600,"feed":"loop-a"})", 0, kT0, {1, kMissing, 3}},
      {R"({"feed":"loop-a","t":1733097600,"values":{"dtemp_v":-3e-2,"dtemp_h":12,"flow":-0}})", 0, kT0,
       {-0.0, 12, -0.03}},
      {R"({"feed":"loop-a","t":1733097600,"values":{"fl\u006fw":1,"dtemp_h":1e-999}})", 0, kT0,
       {1, 0, kMissing}},
      {"  { \"feed\" : \"pump-2\" ,\t\"t\" : 1733097600 , \"values\" : { \"p\" : 5 } }  \r", 1, kT0, {5}},
      {R"({"feed":"pump-2","t":1733097600,"values":{"p":123456789012345678901234567890}})", 1, kT0,
       {123456789012345678901234567890.0}},
      {R"({"feed":"loop-\u0061","t":1733097600,"values":{"flow":1}})", 0, kT0, {1, kMissing, kMissing}},
  };
}

TEST(LineParserTable, GoodLinesDecodeExactly) {
  LineParser parser(TestConfig(), kSkew);
  for (const GoodCase& c : GoodCases()) {
    SCOPED_TRACE("line: " + c.line);
    const ParsedLine p = parser.Parse(c.line, kNow);
    ASSERT_EQ(p.kind, Kind::kSample) << Describe(p);
    EXPECT_EQ(p.sample.feed, c.feed);
    const Sample& s = p.sample.sample;
    EXPECT_EQ(s.t, c.t);
    EXPECT_EQ(s.missing_mask, MaskOf(c.values));
    ASSERT_EQ(s.values.size(), c.values.size());
    for (size_t i = 0; i < c.values.size(); ++i) {
      if (std::isnan(c.values[i])) {
        EXPECT_TRUE(std::isnan(s.values[i])) << "channel " << i;
      } else {
        EXPECT_EQ(s.values[i], c.values[i]) << "channel " << i;
        EXPECT_EQ(std::signbit(s.values[i]), std::signbit(c.values[i])) << "channel " << i;
      }
    }
  }
}

TEST(LineParser, WideFeedUsesAllSixtyFourMaskBits) {
  LineParser parser(TestConfig(), kSkew);
  std::string csv = "wide,1733097600";
  std::string json = R"({"feed":"wide","t":1733097600,"values":{)";
  for (int c = 0; c < kMaxChannels; ++c) {
    csv += c == 63 ? "," : "," + std::to_string(c);
    if (c < 63) json += (c ? "," : "") + std::string("\"c") + std::to_string(63 - c - 1) + "\":" + std::to_string(c);
  }
  json += "}}";
  for (const std::string& line : {csv, json}) {
    SCOPED_TRACE(line);
    const ParsedLine p = parser.Parse(line, kNow);
    ASSERT_EQ(p.kind, Kind::kSample) << Describe(p);
    EXPECT_EQ(p.sample.feed, 2u);
    EXPECT_EQ(p.sample.sample.missing_mask, std::uint64_t{1} << 63);
    ASSERT_EQ(p.sample.sample.values.size(), 64u);
    EXPECT_TRUE(std::isnan(p.sample.sample.values[63]));
  }
  EXPECT_EQ(parser.Parse(csv, kNow).sample.sample.values[5], 5.0);
  EXPECT_EQ(parser.Parse(json, kNow).sample.sample.values[62 - 5], 5.0);
  std::string all_empty = "wide,1733097600" + std::string(64, ',');
  EXPECT_EQ(parser.Parse(all_empty, kNow).reason, R::kNoValues);
}

TEST(LineParser, AuthLines) {
  LineParser parser(TestConfig(), kSkew);
  struct {
    std::string line, token;
  } cases[] = {{"auth s3cret", "s3cret"}, {"auth   tok en \t\r", "tok en"}, {"  auth x", "x"}, {"auth ", ""}};
  for (const auto& c : cases) {
    const ParsedLine p = parser.Parse(c.line, kNow);
    ASSERT_EQ(p.kind, Kind::kAuth) << c.line << " -> " << Describe(p);
    EXPECT_EQ(p.token, c.token);
  }
  // Not auth lines: no space, or a bad byte.
  EXPECT_EQ(parser.Parse("auth", kNow).reason, R::kUnknownFeed);
  EXPECT_EQ(parser.Parse("auth \xff", kNow).reason, R::kBadEncoding);
}

TEST(LineParser, MessagesQuoteUserTextSafely) {
  LineParser parser(TestConfig(), kSkew);
  // JSON escapes can smuggle control characters into strings; replies stay one line.
  ParsedLine p = parser.Parse(R"({"feed":"a\nb\u0000c","t":1733097600,"values":{"flow":1}})", kNow);
  ASSERT_EQ(p.reason, R::kUnknownFeed);
  ExpectOneLineMessage(p);
  EXPECT_NE(p.message.find("'a\\nb\\x00c'"), std::string::npos) << p.message;
  // Long user text is cut to about 40 bytes, on a UTF-8 boundary.
  const std::string long_feed = std::string(39, 'x') + "\xc3\xa9" + std::string(100, 'y');
  p = parser.Parse(long_feed + ",1,2,3,4", kNow);
  ASSERT_EQ(p.reason, R::kUnknownFeed);
  EXPECT_NE(p.message.find("'" + std::string(39, 'x') + "...'"), std::string::npos) << p.message;
  EXPECT_LT(p.message.size(), 120u);
  // Tabs inside a CSV value are shown escaped.
  p = parser.Parse("loop-a,1733097600,1\t2,2,3", kNow);
  ASSERT_EQ(p.reason, R::kNotANumber);
  EXPECT_NE(p.message.find("'1\\t2'"), std::string::npos) << p.message;
}

TEST(LineParser, ScratchBufferSurvivesLongAndShortLines) {
  LineParser parser(TestConfig(), kSkew);
  const std::string good = R"({"feed":"loop-a","t":1733097600,"values":{"flow":1}})";
  const std::string longer = R"({"feed":"loop-a","t":1733097600,"values":{"flow":1})" + std::string(100000, ' ') + "}";
  for (int i = 0; i < 3; ++i) {
    EXPECT_EQ(parser.Parse(good, kNow).kind, Kind::kSample);
    EXPECT_EQ(parser.Parse(longer, kNow).kind, Kind::kSample);
    // A shorter line after a longer one must not see the old bytes.
    EXPECT_EQ(parser.Parse(R"({"feed":"loop-a","t":1733097600,"values":{"flow":1})", kNow).reason, R::kBadJson);
  }
  // Deep nesting inside an ignored field is reported, not a crash.
  const std::string deep = R"({"x":)" + std::string(5000, '[') + std::string(5000, ']') +
                           R"(,"feed":"loop-a","t":1733097600,"values":{"flow":1}})";
  const ParsedLine p = parser.Parse(deep, kNow);
  EXPECT_EQ(p.kind, Kind::kReject);
  ExpectOneLineMessage(p);
}

// ---------------------------------------------------------------------------
// Determinism and robustness.

bool SameResult(const ParsedLine& a, const ParsedLine& b) {
  if (a.kind != b.kind) return false;
  switch (a.kind) {
    case Kind::kSample: return a.sample.feed == b.sample.feed && a.sample.sample == b.sample.sample;
    case Kind::kAuth: return a.token == b.token;
    case Kind::kReject: return a.reason == b.reason && a.message == b.message;
  }
  return false;
}

std::vector<std::string> AllTableLines() {
  std::vector<std::string> lines;
  for (const BadCase& c : BadCases()) lines.push_back(c.line);
  for (const GoodCase& c : GoodCases()) lines.push_back(c.line);
  lines.push_back("auth tok");
  return lines;
}

TEST(LineParser, Deterministic) {
  const std::vector<std::string> lines = AllTableLines();
  LineParser first(TestConfig(), kSkew);
  std::vector<ParsedLine> expected;
  for (const std::string& line : lines) expected.push_back(first.Parse(line, kNow));
  // Same parser again, in reverse order (scratch reuse), and a fresh parser.
  for (size_t i = lines.size(); i-- > 0;) {
    EXPECT_TRUE(SameResult(first.Parse(lines[i], kNow), expected[i])) << lines[i];
  }
  LineParser second(TestConfig(), kSkew);
  for (size_t i = 0; i < lines.size(); ++i) {
    EXPECT_TRUE(SameResult(second.Parse(lines[i], kNow), expected[i])) << lines[i];
  }
}

void CheckInvariants(const ParsedLine& p, const std::string& line) {
  const Config& config = TestConfig();
  switch (p.kind) {
    case Kind::kReject: {
      ASSERT_FALSE(p.message.empty()) << line;
      for (const char ch : p.message) {
        const auto b = static_cast<unsigned char>(ch);
        ASSERT_TRUE(b >= 0x20 && b != 0x7F) << "control byte in message for line: " << line;
      }
      const int r = static_cast<int>(p.reason);
      ASSERT_TRUE(r >= 0 && r < kRejectReasonCount);
      break;
    }
    case Kind::kSample: {
      ASSERT_LT(p.sample.feed, config.feeds.size()) << line;
      const Sample& s = p.sample.sample;
      const size_t nch = config.feeds[p.sample.feed].channels.size();
      ASSERT_EQ(s.values.size(), nch) << line;
      ASSERT_NE(s.missing_mask, nch == 64 ? ~std::uint64_t{0} : (std::uint64_t{1} << nch) - 1) << line;
      for (size_t c = 0; c < nch; ++c) {
        ASSERT_EQ(s.missing(static_cast<int>(c)), std::isnan(s.values[c])) << line;
        if (!s.missing(static_cast<int>(c))) {
          ASSERT_TRUE(std::isfinite(s.values[c])) << line;
        }
      }
      ASSERT_LE(s.t, DataTimeAtWall(kNow) + kSkew) << line;
      break;
    }
    case Kind::kAuth: break;
  }
}

TEST(LineParser, RandomBytesAndMutationsNeverCrash) {
  std::mt19937 rng(20241202);
  LineParser parser(TestConfig(), kSkew);
  const std::vector<std::string> seeds = AllTableLines();
  static constexpr char kAlphabet[] = "{}[]\":,.-+eE0123456789 \t\\nultrfasNIa_xyz\r";
  const auto pick = [&](size_t n) { return std::uniform_int_distribution<size_t>(0, n - 1)(rng); };
  const auto random_byte = [&]() -> char {
    if (pick(4) == 0) return static_cast<char>(pick(256));
    return kAlphabet[pick(sizeof kAlphabet - 1)];
  };
  int samples = 0;
  int rejects = 0;
  for (int i = 0; i < 20000; ++i) {
    std::string line;
    if (i % 2 == 0) {
      const size_t len = pick(120);
      for (size_t k = 0; k < len; ++k) line += random_byte();
      if (pick(3) == 0 && !line.empty()) line[0] = '{';
    } else {
      line = seeds[pick(seeds.size())];
      const size_t edits = 1 + pick(4);
      for (size_t e = 0; e < edits; ++e) {
        const size_t op = pick(4);
        const size_t at = line.empty() ? 0 : pick(line.size() + 1);
        if (op == 0 && at < line.size()) {
          line[at] = random_byte();
        } else if (op == 1) {
          line.insert(line.begin() + static_cast<std::ptrdiff_t>(at), random_byte());
        } else if (op == 2 && at < line.size()) {
          line.erase(at, 1 + pick(3));
        } else {
          line.resize(at);
        }
      }
    }
    const ParsedLine p = parser.Parse(line, kNow);
    CheckInvariants(p, line);
    if (HasFatalFailure()) return;
    samples += p.kind == Kind::kSample;
    rejects += p.kind == Kind::kReject;
  }
  // The mutations keep a fair share of lines valid; random bytes are rejected.
  EXPECT_GT(samples, 100);
  EXPECT_GT(rejects, 10000);
}

}  // namespace
}  // namespace lyapcast
