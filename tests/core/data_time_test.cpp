// Data time parsing and formatting. Check values: RFC 3339 examples (RFC 3339
// section 5.8) and epoch seconds computed with `date -u -d ... +%s` (GNU
// coreutils), noted beside each value.
#include "core/data_time.h"

#include <gtest/gtest.h>

#include <cmath>
#include <limits>

#include "core/sample.h"
#include "core/status.h"

namespace lyapcast {
namespace {

TEST(Rfc3339, ParsesUtcWithFraction) {
  // RFC 3339 section 5.8 example "1985-04-12T23:20:50.52Z";
  // `date -u -d 1985-04-12T23:20:50Z +%s` = 482196050.
  auto t = ParseRfc3339("1985-04-12T23:20:50.52Z");
  ASSERT_TRUE(t.ok()) << t.status().ToString();
  EXPECT_EQ(*t, DataTimeFromMicros(482196050LL * 1'000'000 + 520'000));
}

TEST(Rfc3339, ParsesOffsets) {
  // RFC 3339 section 5.8: "1996-12-19T16:39:57-08:00" is 1996-12-20T00:39:57Z;
  // `date -u -d 1996-12-20T00:39:57Z +%s` = 851042397.
  auto t = ParseRfc3339("1996-12-19T16:39:57-08:00");
  ASSERT_TRUE(t.ok());
  EXPECT_EQ(*t, DataTimeFromMicros(851042397LL * 1'000'000));
  auto u = ParseRfc3339("1996-12-20 00:39:57z");
  ASSERT_TRUE(u.ok());
  EXPECT_EQ(*u, *t);
}

TEST(Rfc3339, RoundsSubMicrosecondFractions) {
  auto t = ParseRfc3339("1970-01-01T00:00:00.0000016Z");
  ASSERT_TRUE(t.ok());
  EXPECT_EQ(*t, DataTimeFromMicros(2));
}

TEST(Rfc3339, RejectsMalformed) {
  for (const char* bad : {"", "1985-04-12", "1985-04-12T23:20:50", "1985-13-12T23:20:50Z", "1985-02-30T00:00:00Z",
                          "1985-04-12T24:00:00Z", "1985-04-12T23:20:60Z", "1985-04-12T23:20:50.Z",
                          "1985-04-12T23:20:50Zjunk", "1985-04-12T23:20:50+8:00", "abcd-04-12T23:20:50Z"}) {
    auto t = ParseRfc3339(bad);
    EXPECT_FALSE(t.ok()) << bad;
    if (!t.ok()) {
      EXPECT_NE(t.status().message().find("RFC 3339"), std::string::npos);
    }
  }
}

TEST(Rfc3339, FormatRoundTrips) {
  for (std::int64_t us : {0LL, 1LL, 482196050520000LL, -1LL, 1733097600250000LL}) {
    const DataTime t = DataTimeFromMicros(us);
    auto back = ParseRfc3339(FormatRfc3339(t));
    ASSERT_TRUE(back.ok()) << FormatRfc3339(t);
    EXPECT_EQ(*back, t);
  }
  EXPECT_EQ(FormatRfc3339(DataTime{}), "1970-01-01T00:00:00.000000Z");
  EXPECT_EQ(FormatRfc3339(DataTimeFromMicros(-1)), "1969-12-31T23:59:59.999999Z");
}

TEST(EpochSeconds, ConvertsAndRejectsNonFinite) {
  auto t = DataTimeFromEpochSeconds(1733097600.25);
  ASSERT_TRUE(t.ok());
  EXPECT_EQ(*t, DataTimeFromMicros(1733097600250000LL));
  EXPECT_FALSE(DataTimeFromEpochSeconds(std::nan("")).ok());
  EXPECT_FALSE(DataTimeFromEpochSeconds(std::numeric_limits<double>::infinity()).ok());
  EXPECT_FALSE(DataTimeFromEpochSeconds(1e300).ok());
}

TEST(Duration, ParsesUnitsAndPlainSeconds) {
  EXPECT_EQ(*ParseDuration("250ms"), Micros(250'000));
  EXPECT_EQ(*ParseDuration("30s"), Micros(30'000'000));
  EXPECT_EQ(*ParseDuration("5m"), Micros(300'000'000));
  EXPECT_EQ(*ParseDuration("6h"), Micros(21'600'000'000LL));
  EXPECT_EQ(*ParseDuration("2d"), Micros(172'800'000'000LL));
  EXPECT_EQ(*ParseDuration("0.5"), Micros(500'000));
  EXPECT_EQ(*ParseDuration("1500us"), Micros(1500));
  EXPECT_EQ(*ParseDuration("-1s"), Micros(-1'000'000));
  for (const char* bad : {"", "s", "5 m", "5x", "1e400s", "nan"}) {
    auto d = ParseDuration(bad);
    EXPECT_FALSE(d.ok()) << bad;
    if (!d.ok()) {
      EXPECT_NE(d.status().message().find("250ms"), std::string::npos);
    }
  }
}

TEST(Duration, FormatsCompactly) {
  EXPECT_EQ(FormatDuration(Micros(500'000)), "500ms");
  EXPECT_EQ(FormatDuration(6 * 3600 * kSecond), "6h");
  EXPECT_EQ(FormatDuration(Micros(1'500'000)), "1.5s");
  EXPECT_EQ(FormatDuration(Micros{}), "0s");
}

TEST(ByteSize, ParsesBinaryUnits) {
  EXPECT_EQ(*ParseByteSize("64KiB"), 65536u);
  EXPECT_EQ(*ParseByteSize("2MiB"), 2u * 1024 * 1024);
  EXPECT_EQ(*ParseByteSize("100"), 100u);
  EXPECT_FALSE(ParseByteSize("64KB").ok());
  EXPECT_FALSE(ParseByteSize("-1").ok());
  EXPECT_FALSE(ParseByteSize("99999999999999999999GiB").ok());
}

TEST(Sample, EqualityIgnoresMissingPlaceholders) {
  Sample a{DataTimeFromMicros(10), {1.0, std::nan(""), 3.0}, 0b010};
  Sample b{DataTimeFromMicros(10), {1.0, 42.0, 3.0}, 0b010};
  EXPECT_EQ(a, b);
  b.values[2] = 3.5;
  EXPECT_FALSE(a == b);
}

TEST(Status, ResultCarriesValueOrError) {
  Result<int> good = 3;
  ASSERT_TRUE(good.ok());
  EXPECT_EQ(*good, 3);
  Result<int> bad = Status::Invalid("nope");
  EXPECT_FALSE(bad.ok());
  EXPECT_EQ(bad.status().ToString(), "invalid-argument: nope");
}

}  // namespace
}  // namespace lyapcast
