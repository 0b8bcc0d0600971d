// Tests for lib/config's scenario files: the shipped demo scenario loads,
// defaults apply, changes parse, and each mistake is reported as
// "<file>:<line>: <key path>: ...; <allowed>".
#include "config/scenario.h"

#include <gtest/gtest.h>

#include <filesystem>
#include <string>
#include <vector>

namespace lyapcast {
namespace {

namespace fs = std::filesystem;

const std::string kSourceDir = LYAPCAST_SOURCE_DIR;

Scenario MustParse(const std::string& yaml) {
  Result<Scenario> r = ParseScenario(yaml, "s.yaml");
  EXPECT_TRUE(r.ok()) << r.status().ToString();
  return r.ok() ? std::move(r).value() : Scenario{};
}

// Asserts an invalid-argument error whose message starts with
// "s.yaml:<line>: <path>: " and contains every fragment.
void ExpectError(const std::string& yaml, int line, const std::string& path,
                 const std::vector<std::string>& fragments) {
  SCOPED_TRACE(yaml);
  const Result<Scenario> r = ParseScenario(yaml, "s.yaml");
  ASSERT_FALSE(r.ok()) << "accepted";
  EXPECT_EQ(r.status().code(), StatusCode::kInvalidArgument);
  const Status status = r.status();
  const std::string& msg = status.message();
  const std::string prefix =
      path.empty() ? "s.yaml:" + std::to_string(line) + ": " : "s.yaml:" + std::to_string(line) + ": " + path + ": ";
  EXPECT_EQ(msg.rfind(prefix, 0), 0u) << "message: " << msg << "\nexpected prefix: " << prefix;
  for (const std::string& f : fragments) {
    EXPECT_NE(msg.find(f), std::string::npos) << "message: " << msg << "\nmissing: " << f;
  }
}

// A scenario whose first feed entry is `- feed: a` on line 2 followed by
// `body` (indented 4 spaces, from line 3).
std::string FeedWith(const std::string& body) {
  return "feeds:\n"
         "  - feed: a\n" +
         body;
}


// --- the shipped scenario -------------------------------------------------------

TEST(ScenarioFiles, DemoScenarioLoads) {
  const fs::path file = fs::path(kSourceDir) / "config" / "demo-scenario.yaml";
  Result<Scenario> r = LoadScenario(file);
  ASSERT_TRUE(r.ok()) << r.status().ToString();
  const Scenario& s = *r;
  EXPECT_EQ(s.source, file.string());
  ASSERT_TRUE(s.duration.has_value());
  EXPECT_EQ(*s.duration, 2 * 3600 * kSecond);
  ASSERT_EQ(s.feeds.size(), 2u);

  const ScenarioFeed& a = s.feeds[0];
  EXPECT_EQ(a.feed, "loop-a");
  EXPECT_EQ(a.seed, 11u);
  EXPECT_EQ(a.transient, 5 * 60 * kSecond);
  EXPECT_TRUE(a.from.empty());
  EXPECT_FALSE(a.step.has_value());
  EXPECT_EQ(a.noise, (std::vector<double>{0.05, 0.05, 0.05}));
  EXPECT_EQ(a.gap_rate, 0.02);
  EXPECT_EQ(a.missing_rate, 0.01);
  ASSERT_EQ(a.changes.size(), 2u);
  EXPECT_EQ(a.changes[0].name, "ra");
  EXPECT_EQ(a.changes[0].from, 28);
  EXPECT_EQ(a.changes[0].to, 30);
  EXPECT_EQ(a.changes[0].t1, Micros(0));
  EXPECT_EQ(a.changes[0].t2, 15 * 60 * kSecond);
  EXPECT_EQ(a.changes[1].from, 38);
  EXPECT_EQ(a.changes[1].t1, 15 * 60 * kSecond);
  EXPECT_EQ(a.changes[1].t2, 15 * 60 * kSecond);
  EXPECT_EQ(a.lines.changes.size(), 2u);

  const ScenarioFeed& b = s.feeds[1];
  EXPECT_EQ(b.feed, "rig-b");
  EXPECT_EQ(b.seed, 12u);
  EXPECT_EQ(b.transient, 60 * kSecond);
  // Element by element: GCC 12.2 at -O2 with AVX-512 (-march=native here)
  // builds the constant std::vector<double>{a, a, 0, 0} as {a, a, a, a}.
  ASSERT_EQ(b.noise.size(), 4u);
  EXPECT_EQ(b.noise[0], 0.01);
  EXPECT_EQ(b.noise[1], 0.01);
  EXPECT_EQ(b.noise[2], 0.0);
  EXPECT_EQ(b.noise[3], 0.0);
  EXPECT_EQ(b.gap_rate, 0.02);
  EXPECT_EQ(b.missing_rate, 0);
  EXPECT_TRUE(b.changes.empty());
  EXPECT_GT(b.lines.feed, a.lines.feed);
}

TEST(ScenarioFiles, MissingFileIsAnIoError) {
  const Result<Scenario> r = LoadScenario("/nonexistent/scenario.yaml");
  ASSERT_FALSE(r.ok());
  EXPECT_EQ(r.status().code(), StatusCode::kIoError);
  EXPECT_NE(r.status().message().find("/nonexistent/scenario.yaml"), std::string::npos) << r.status().message();
}

// --- defaults and every key ------------------------------------------------------

TEST(ScenarioDefaults, OnlyFeedGetsEveryDefault) {
  const Scenario s = MustParse("feeds:\n  - feed: a\n");
  EXPECT_EQ(s.source, "s.yaml");
  EXPECT_FALSE(s.duration.has_value());
  ASSERT_EQ(s.feeds.size(), 1u);
  const ScenarioFeed& f = s.feeds[0];
  EXPECT_EQ(f.feed, "a");
  EXPECT_EQ(f.seed, 1u);
  EXPECT_EQ(f.transient, Micros(0));
  EXPECT_TRUE(f.from.empty());
  EXPECT_FALSE(f.step.has_value());
  EXPECT_TRUE(f.noise.empty());
  EXPECT_EQ(f.gap_rate, 0);
  EXPECT_EQ(f.missing_rate, 0);
  EXPECT_TRUE(f.changes.empty());
  EXPECT_EQ(f.lines.feed, 2);
  EXPECT_EQ(f.lines.from, 0);
  EXPECT_EQ(f.lines.noise, 0);
}

TEST(ScenarioDefaults, EveryKeyIsRead) {
  const Scenario s = MustParse(
      "duration: 90s\n"
      "feeds:\n"
      "  - feed: a\n"
      "    seed: 18446744073709551615\n"
      "    transient: 0s\n"
      "    from: [1, -2.5]\n"
      "    step: 250ms\n"
      "    noise: 0.1\n"
      "    gap_rate: 0\n"
      "    missing_rate: 1\n"
      "    changes:\n"
      "      - q=2@1s\n"
      "  - {feed: b, noise: [0, 0.5]}\n");
  ASSERT_TRUE(s.duration.has_value());
  EXPECT_EQ(*s.duration, 90 * kSecond);
  ASSERT_EQ(s.feeds.size(), 2u);
  const ScenarioFeed& a = s.feeds[0];
  EXPECT_EQ(a.seed, 18446744073709551615ULL);
  EXPECT_EQ(a.from, (std::vector<double>{1, -2.5}));
  EXPECT_EQ(a.lines.from, 6);
  ASSERT_TRUE(a.step.has_value());
  EXPECT_EQ(*a.step, Micros(250'000));
  EXPECT_EQ(a.noise, (std::vector<double>{0.1}));  // one number: every channel
  EXPECT_EQ(a.lines.noise, 8);
  EXPECT_EQ(a.missing_rate, 1);
  ASSERT_EQ(a.changes.size(), 1u);
  EXPECT_EQ(a.changes[0].name, "q");
  EXPECT_EQ(a.lines.changes, (std::vector<int>{12}));
  EXPECT_EQ(s.feeds[1].feed, "b");
  EXPECT_EQ(s.feeds[1].lines.feed, 13);
  EXPECT_EQ(s.feeds[1].noise, (std::vector<double>{0, 0.5}));
  EXPECT_EQ(s.Where(1, "noise", s.feeds[1].lines.noise), "s.yaml:13: feeds[1].noise");
  EXPECT_EQ(s.Where(0, "", 3), "s.yaml:3: feeds[0]");
}

// --- errors --------------------------------------------------------------------------

TEST(ScenarioErrors, UnknownKeysListTheAllowedOnes) {
  ExpectError("duration: 1h\nspeed: 10\nfeeds: [{feed: a}]\n", 2, "speed",
              {"unknown key", "at the top level", "duration, feeds"});
  ExpectError(FeedWith("    seed: 3\n    gap-rate: 0.1\n"), 4, "feeds[0].gap-rate",
              {"unknown key", "under feeds[0]", "gap_rate", "missing_rate", "changes"});
}

TEST(ScenarioErrors, DuplicateKeysNameTheSecondLine) {
  ExpectError(FeedWith("    seed: 3\n    seed: 4\n"), 4, "feeds[0].seed", {"duplicate key (first at line 3)"});
  ExpectError("feeds: [{feed: a}]\nfeeds: [{feed: b}]\n", 2, "feeds", {"duplicate key (first at line 1)"});
}

TEST(ScenarioErrors, RatesOutOfRange) {
  ExpectError(FeedWith("    gap_rate: 1\n"), 3, "feeds[0].gap_rate", {"must be a number in [0, 1); got '1'"});
  ExpectError(FeedWith("    gap_rate: -0.1\n"), 3, "feeds[0].gap_rate", {"[0, 1)", "'-0.1'"});
  ExpectError(FeedWith("    missing_rate: 1.5\n"), 3, "feeds[0].missing_rate", {"must be a number in [0, 1]"});
  ExpectError(FeedWith("    gap_rate: lots\n"), 3, "feeds[0].gap_rate", {"'lots'"});
}

TEST(ScenarioErrors, EachFeedAtMostOnce) {
  ExpectError(
      "feeds:\n"
      "  - feed: a\n"
      "  - feed: b\n"
      "  - feed: a\n"
      "    seed: 2\n",
      4, "feeds[2].feed", {"feed 'a'", "first at line 2", "at most once"});
}

TEST(ScenarioErrors, MissingFeed) {
  ExpectError(
      "feeds:\n"
      "  - feed: a\n"
      "  - seed: 3\n"
      "    noise: 0.1\n",
      3, "feeds[1].feed", {"missing", "feed: loop-a"});
  ExpectError("duration: 1h\n", 1, "feeds", {"missing", "at least one feed"});
  ExpectError("feeds: []\n", 1, "feeds", {"at least one feed", "got a list"});
  ExpectError("feeds:\n", 1, "feeds", {"at least one feed", "got nothing"});
  ExpectError("", 1, "", {"the scenario is empty"});
  ExpectError("- feed: a\n", 1, "", {"must be a mapping with the keys duration and feeds", "got a list"});
}

TEST(ScenarioErrors, FeedIdGrammar) {
  ExpectError(FeedWith("  - feed: Loop A\n"), 3, "feeds[1].feed", {"a feed id", "'Loop A'"});
  ExpectError("feeds:\n  - feed: [a, b]\n", 2, "feeds[0].feed", {"a feed id", "got a list"});
}

TEST(ScenarioErrors, DurationsSeedsAndNumbers) {
  ExpectError("duration: 0s\nfeeds: [{feed: a}]\n", 1, "duration", {"a positive duration"});
  ExpectError(FeedWith("    transient: -5m\n"), 3, "feeds[0].transient", {"a duration >= 0"});
  ExpectError(FeedWith("    step: 0s\n"), 3, "feeds[0].step", {"a positive duration"});
  ExpectError(FeedWith("    seed: -1\n"), 3, "feeds[0].seed", {"an integer in [0, 18446744073709551615]"});
  ExpectError(FeedWith("    seed: 1.5\n"), 3, "feeds[0].seed", {"an integer"});
  ExpectError(FeedWith("    noise: [0.1, -0.1]\n"), 3, "feeds[0].noise[1]", {"a number >= 0", "'-0.1'"});
  ExpectError(FeedWith("    noise: []\n"), 3, "feeds[0].noise", {"one number (for every channel) or a list"});
  ExpectError(FeedWith("    from: 1\n"), 3, "feeds[0].from", {"a list with one number per channel"});
  ExpectError(FeedWith("    from: [1, x]\n"), 3, "feeds[0].from[1]", {"a finite number", "'x'"});
}

TEST(ScenarioErrors, ChangesUseTheCliSyntax) {
  ExpectError(FeedWith("    changes:\n      - ra=35@10m\n      - ra=1..2@5s\n"), 5, "feeds[0].changes[1]",
              {"'ra=1..2@5s'", "a ramp needs two values and two times", "NAME=VALUE@T"});
  ExpectError(FeedWith("    changes: ra=35@10m\n"), 3, "feeds[0].changes", {"a list of changes"});
  ExpectError(FeedWith("    changes: [{ra: 35}]\n"), 3, "feeds[0].changes[0]", {"a change such as"});
}

TEST(ScenarioErrors, YamlSyntax) {
  const Result<Scenario> r = ParseScenario("feeds:\n  - feed: a\n   seed: [1\n", "s.yaml");
  ASSERT_FALSE(r.ok());
  EXPECT_EQ(r.status().message().rfind("s.yaml:", 0), 0u) << r.status().message();
  EXPECT_NE(r.status().message().find("YAML syntax error"), std::string::npos) << r.status().message();
}

// --- parameter changes ------------------------------------------------------------------

TEST(ParameterChanges, StepsAndRamps) {
  Result<ParameterChange> step = ParseParameterChange("ra=35@10m");
  ASSERT_TRUE(step.ok()) << step.status().ToString();
  EXPECT_EQ(step->name, "ra");
  EXPECT_EQ(step->from, 35);
  EXPECT_EQ(step->to, 35);
  EXPECT_EQ(step->t1, 600 * kSecond);
  EXPECT_EQ(step->t2, 600 * kSecond);
  EXPECT_EQ(step->ValueAt(600 * kSecond), 35);
  EXPECT_EQ(step->ValueAt(3600 * kSecond), 35);

  Result<ParameterChange> ramp = ParseParameterChange("ra=28..35@5m..15m");
  ASSERT_TRUE(ramp.ok()) << ramp.status().ToString();
  EXPECT_EQ(ramp->from, 28);
  EXPECT_EQ(ramp->to, 35);
  EXPECT_EQ(ramp->t1, 300 * kSecond);
  EXPECT_EQ(ramp->t2, 900 * kSecond);
  EXPECT_EQ(ramp->ValueAt(300 * kSecond), 28);
  EXPECT_DOUBLE_EQ(ramp->ValueAt(600 * kSecond), 31.5);
  EXPECT_EQ(ramp->ValueAt(900 * kSecond), 35);
  EXPECT_EQ(ramp->ValueAt(1000 * kSecond), 35);
}

TEST(ParameterChanges, ErrorsQuoteTheTextAndShowTheForms) {
  for (const char* text : {"ra35@10m", "ra=35", "ra=x@1s", "ra=1..2@5s", "ra=1@5m..6m", "ra=1..2@5m..5m",
                           "ra=1..2@a..b", "ra=1@soon", "ra=inf@1s"}) {
    SCOPED_TRACE(text);
    const Result<ParameterChange> r = ParseParameterChange(text);
    ASSERT_FALSE(r.ok());
    EXPECT_EQ(r.status().code(), StatusCode::kInvalidArgument);
    const std::string msg = r.status().message();
    EXPECT_EQ(msg.rfind(std::string("'") + text + "': ", 0), 0u) << msg;
    EXPECT_NE(msg.find("NAME=VALUE@T (a step) or NAME=A..B@T1..T2 (a ramp)"), std::string::npos) << msg;
  }
}

}  // namespace
}  // namespace lyapcast
