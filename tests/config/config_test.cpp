// Tests for lib/config: the shipped configs load, defaults apply, and every
// class of mistake is reported as "<file>:<line>: <key path>: ...; <allowed>".
#include "config/config.h"

#include <gtest/gtest.h>
#include <unistd.h>

#include <filesystem>
#include <fstream>
#include <string>
#include <vector>

namespace lyapcast {
namespace {

namespace fs = std::filesystem;

const std::string kSourceDir = LYAPCAST_SOURCE_DIR;

// A valid single-feed config to append to or edit.
const char* const kMinimal =
    "feeds:\n"
    "  - id: a\n"
    "    channels: [x, y]\n";

Config MustParse(const std::string& yaml, const fs::path& source = "t.yaml") {
  Result<Config> r = ParseConfig(yaml, source);
  EXPECT_TRUE(r.ok()) << r.status().ToString();
  return r.ok() ? std::move(r).value() : Config{};
}

// Asserts an invalid-argument error whose message starts with
// "t.yaml:<line>: <path>:" and contains every fragment.
void ExpectError(const std::string& yaml, int line, const std::string& path,
                 const std::vector<std::string>& fragments) {
  SCOPED_TRACE(yaml);
  const Result<Config> r = ParseConfig(yaml, "t.yaml");
  ASSERT_FALSE(r.ok()) << "accepted";
  EXPECT_EQ(r.status().code(), StatusCode::kInvalidArgument);
  const Status status = r.status();
  const std::string& msg = status.message();
  const std::string prefix =
      path.empty() ? "t.yaml:" + std::to_string(line) + ": " : "t.yaml:" + std::to_string(line) + ": " + path + ": ";
  EXPECT_EQ(msg.rfind(prefix, 0), 0u) << "message: " << msg << "\nexpected prefix: " << prefix;
  for (const std::string& f : fragments)
    EXPECT_NE(msg.find(f), std::string::npos) << "message: " << msg << "\nmissing: " << f;
}

// A config with one feed whose feed-level body (indented 4 spaces) is `body`;
// the feed's keys start on line 4.
std::string FeedWith(const std::string& body) {
  return "feeds:\n"
         "  - id: a\n"
         "    channels: [x, y]\n" +
         body;
}

// --- shipped configs ----------------------------------------------------------

TEST(ConfigFiles, DemoLoadsAndValidates) {
  const fs::path file = fs::path(kSourceDir) / "config" / "demo.yaml";
  Result<Config> r = LoadConfig(file);
  ASSERT_TRUE(r.ok()) << r.status().ToString();
  const Config& c = *r;
  EXPECT_EQ(c.source, file);
  EXPECT_EQ(c.listen.ingest.ToString(), "127.0.0.1:7301");
  EXPECT_EQ(c.listen.http.ToString(), "127.0.0.1:7302");
  EXPECT_EQ(c.storage.path, (fs::path(kSourceDir) / "var/lyapcast.db").lexically_normal());
  ASSERT_EQ(c.feeds.size(), 2u);

  const FeedConfig& a = c.feeds[0];
  EXPECT_EQ(a.id, "loop-a");
  EXPECT_EQ(a.channels, (std::vector<std::string>{"flow", "dtemp_h", "dtemp_v"}));
  EXPECT_EQ(a.units, (std::vector<std::string>{"m/s", "K", "K"}));
  EXPECT_EQ(a.step, Micros(200'000));
  ASSERT_TRUE(a.dynamics.has_value());
  ASSERT_EQ(a.dynamics->equations.size(), 3u);
  EXPECT_EQ(a.dynamics->equations[0].first, "flow");
  EXPECT_EQ(a.dynamics->equations[0].second, "pr*(dtemp_h - flow)");
  EXPECT_EQ(a.dynamics->equations[2].first, "dtemp_v");
  ASSERT_EQ(a.dynamics->constants.size(), 3u);
  EXPECT_EQ(a.dynamics->constants[1].first, "ra");
  EXPECT_DOUBLE_EQ(a.dynamics->constants[1].second, 28.0);
  ASSERT_EQ(a.dynamics->constraints.size(), 2u);
  EXPECT_EQ(a.dynamics->constraints[0].kind, ConstraintKind::kVelocity);
  EXPECT_EQ(a.dynamics->constraints[1].kind, ConstraintKind::kResidual);
  EXPECT_DOUBLE_EQ(a.dynamics->constraints[0].anneal.mid, 0.3);

  const FeedConfig& b = c.feeds[1];
  EXPECT_EQ(b.id, "rig-b");
  EXPECT_EQ(b.channels, (std::vector<std::string>{"x", "v", "drive_s", "drive_c"}));
  EXPECT_EQ(b.model.activation, Activation::kSilu);
  ASSERT_TRUE(b.dynamics.has_value());
  EXPECT_EQ(b.dynamics->equations[1].second, "-delta*v - alpha*x - beta*x^3 + gamma*drive_c");
  EXPECT_EQ(c.FeedIndex("rig-b"), 1);
  EXPECT_EQ(b.ChannelIndex("drive_c"), 3);
}

TEST(ConfigFiles, MinimalLoadsWithDefaults) {
  const fs::path file = fs::path(kSourceDir) / "config" / "minimal.yaml";
  Result<Config> r = LoadConfig(file);
  ASSERT_TRUE(r.ok()) << r.status().ToString();
  ASSERT_EQ(r->feeds.size(), 1u);
  EXPECT_FALSE(r->feeds[0].dynamics.has_value());
  EXPECT_EQ(r->storage.path, fs::path(kSourceDir) / "config" / "var/lyapcast.db");
}

// --- defaults and full key coverage ---------------------------------------------

TEST(ConfigDefaults, MinimalStringGetsEveryDefault) {
  const Config c = MustParse(kMinimal, "");
  EXPECT_EQ(c.listen.ingest.host, "127.0.0.1");
  EXPECT_EQ(c.listen.ingest.port, 7301);
  EXPECT_EQ(c.listen.http.port, 7302);
  EXPECT_FALSE(c.listen.allow_remote_without_tokens);
  EXPECT_EQ(c.limits.max_line, 65536u);
  EXPECT_EQ(c.limits.max_connections, 256);
  EXPECT_EQ(c.limits.idle_timeout, 300 * kSecond);
  EXPECT_EQ(c.limits.commit_every, Micros(5'000));
  EXPECT_EQ(c.limits.commit_batch, 4096);
  EXPECT_EQ(c.limits.max_future_skew, 10 * kSecond);
  EXPECT_EQ(c.storage.path, fs::path("var/lyapcast.db"));  // source "" keeps it relative
  EXPECT_EQ(c.storage.retention, 6 * 3600 * kSecond);
  EXPECT_EQ(c.storage.keep_models, 200);
  EXPECT_FALSE(c.auth.ingest_token_file || c.auth.read_token_file || c.auth.admin_token_file);
  EXPECT_EQ(c.training.threads, 1);
  EXPECT_FALSE(c.training.lockstep);
  ASSERT_EQ(c.feeds.size(), 1u);
  const FeedConfig& f = c.feeds[0];
  EXPECT_EQ(f.id, "a");
  EXPECT_TRUE(f.units.empty());
  EXPECT_EQ(f.step, kSecond);
  EXPECT_FALSE(f.dynamics.has_value());
  EXPECT_EQ(f.model.hidden, (std::vector<int>{64, 64}));
  EXPECT_EQ(f.model.activation, Activation::kTanh);
  EXPECT_EQ(f.model.family, ModelFamily::kNeural);
  EXPECT_EQ(f.model.degrees, (std::vector<int>{2, 3, 4, 5, 6}));
  EXPECT_TRUE(f.model.denoise);
  EXPECT_EQ(f.model.rollout, 4);
  EXPECT_EQ(f.model.max_gap, 8);
  EXPECT_DOUBLE_EQ(f.retrain.lyapunov_fraction, 0.5);
  EXPECT_EQ(f.retrain.min_interval, 30 * kSecond);
  EXPECT_EQ(f.retrain.max_interval, 3600 * kSecond);
  EXPECT_EQ(f.retrain.min_pairs, 500);
  EXPECT_DOUBLE_EQ(f.retrain.replay, 0.3);
  EXPECT_DOUBLE_EQ(f.retrain.validation, 0.2);
  EXPECT_EQ(f.retrain.iterations, 2000);
  EXPECT_EQ(f.retrain.batch, 256);
  EXPECT_DOUBLE_EQ(f.retrain.learning_rate, 1e-3);
  EXPECT_DOUBLE_EQ(f.retrain.weight_decay, 0.0);
  EXPECT_DOUBLE_EQ(f.retrain.clip, 1.0);
  EXPECT_EQ(f.retrain.time_budget, 60 * kSecond);
  EXPECT_DOUBLE_EQ(f.retrain.promote_tolerance, 0.05);
  EXPECT_EQ(f.retrain.strategy, RetrainStrategy::kSupervised);
  EXPECT_STREQ(RetrainStrategyName(f.retrain.strategy), "supervised");
  EXPECT_DOUBLE_EQ(f.monitor.horizon_tol, 0.5);
  EXPECT_DOUBLE_EQ(f.monitor.change_threshold, 15.0);
  EXPECT_DOUBLE_EQ(f.monitor.change_drift, 0.5);
  EXPECT_DOUBLE_EQ(f.health.drift_alert, 2.0);
  EXPECT_DOUBLE_EQ(f.health.drift_alarm, 5.0);
  EXPECT_EQ(f.health.data_age_alert, 30 * kSecond);
  EXPECT_EQ(f.health.data_age_alarm, 300 * kSecond);
  EXPECT_FALSE(f.health.model_age_alert_lyapunov) << "unset: derived from the cadence";
  EXPECT_FALSE(f.health.model_age_alarm_lyapunov);
}

TEST(ConfigDefaults, EveryKeyIsRead) {
  const std::string yaml = R"(
listen: {ingest: "[::1]:9001", http: "localhost:0", allow_remote_without_tokens: true}
limits: {max_line: 1MiB, max_connections: 3, idle_timeout: 90, commit_every: 250us,
         commit_batch: 7, max_future_skew: 0}
storage: {path: /data/x.db, retention: 2d, keep_models: 0}
auth: {ingest_token_file: /k/i, read_token_file: /k/r, admin_token_file: /k/a}
training: {threads: 2, lockstep: true}
feeds:
  - id: feed_9
    channels: [_a, B2]
    units: [m, ""]
    step: 0.25
    dynamics:
      time_unit: 2s
      equations: {B2: "-_a", _a: "k*B2"}
      constants: {k: -1.5e-2}
      constraints: [{kind: residual, weight: 0, anneal: {mid: 1, width: 0.5}}]
    model: {family: auto, degree: 3, denoise: off, hidden: [8], activation: silu, rollout: 1, max_gap: 2}
    retrain: {lyapunov_fraction: 2, min_interval: 0s, max_interval: 1m, min_pairs: 1,
              replay: 0, validation: 0.5, iterations: 1, batch: 1, learning_rate: 0.1,
              weight_decay: 1e-4, clip: 3, time_budget: 2m, promote_tolerance: 0}
    monitor: {horizon_tol: 0.1, change_threshold: 1, change_drift: 0}
    health: {drift_alert: 1, drift_alarm: 1, data_age_alert: 1s, data_age_alarm: 1s,
             model_age_alert_lyapunov: 0.5, model_age_alarm_lyapunov: 0.75}
)";
  const Config c = MustParse(yaml, "/etc/lc/x.yaml");
  EXPECT_EQ(c.listen.ingest.host, "::1");
  EXPECT_EQ(c.listen.ingest.port, 9001);
  EXPECT_EQ(c.listen.ingest.ToString(), "[::1]:9001");
  EXPECT_EQ(c.listen.http.ToString(), "localhost:0");
  EXPECT_TRUE(c.listen.allow_remote_without_tokens);
  EXPECT_EQ(c.limits.max_line, 1u << 20);
  EXPECT_EQ(c.limits.max_connections, 3);
  EXPECT_EQ(c.limits.idle_timeout, 90 * kSecond);
  EXPECT_EQ(c.limits.commit_every, Micros(250));
  EXPECT_EQ(c.limits.commit_batch, 7);
  EXPECT_EQ(c.limits.max_future_skew, Micros{});
  EXPECT_EQ(c.storage.path, fs::path("/data/x.db"));
  EXPECT_EQ(c.storage.retention, 2 * 86400 * kSecond);
  EXPECT_EQ(c.storage.keep_models, 0);
  EXPECT_EQ(*c.auth.ingest_token_file, fs::path("/k/i"));
  EXPECT_EQ(*c.auth.read_token_file, fs::path("/k/r"));
  EXPECT_EQ(*c.auth.admin_token_file, fs::path("/k/a"));
  EXPECT_EQ(c.training.threads, 2);
  EXPECT_TRUE(c.training.lockstep);
  const FeedConfig& f = c.feeds.at(0);
  EXPECT_EQ(f.id, "feed_9");
  EXPECT_EQ(f.units, (std::vector<std::string>{"m", ""}));
  EXPECT_EQ(f.step, Micros(250'000));
  ASSERT_TRUE(f.dynamics.has_value());
  EXPECT_EQ(f.dynamics->time_unit, 2 * kSecond);
  // Equations come back in channel order, whatever order the file used.
  ASSERT_EQ(f.dynamics->equations.size(), 2u);
  EXPECT_EQ(f.dynamics->equations[0], (std::pair<std::string, std::string>{"_a", "k*B2"}));
  EXPECT_EQ(f.dynamics->equations[1], (std::pair<std::string, std::string>{"B2", "-_a"}));
  ASSERT_EQ(f.dynamics->constants.size(), 1u);
  EXPECT_DOUBLE_EQ(f.dynamics->constants[0].second, -0.015);
  ASSERT_EQ(f.dynamics->constraints.size(), 1u);
  EXPECT_EQ(f.dynamics->constraints[0].kind, ConstraintKind::kResidual);
  EXPECT_DOUBLE_EQ(f.dynamics->constraints[0].weight, 0.0);
  EXPECT_DOUBLE_EQ(f.dynamics->constraints[0].anneal.mid, 1.0);
  EXPECT_DOUBLE_EQ(f.dynamics->constraints[0].anneal.width, 0.5);
  EXPECT_EQ(f.model.family, ModelFamily::kAuto);
  EXPECT_EQ(f.model.degrees, (std::vector<int>{3}));
  EXPECT_FALSE(f.model.denoise);
  EXPECT_EQ(f.model.hidden, (std::vector<int>{8}));
  EXPECT_EQ(f.model.activation, Activation::kSilu);
  EXPECT_EQ(f.model.rollout, 1);
  EXPECT_EQ(f.model.max_gap, 2);
  EXPECT_DOUBLE_EQ(f.retrain.lyapunov_fraction, 2.0);
  EXPECT_EQ(f.retrain.min_interval, Micros{});
  EXPECT_EQ(f.retrain.max_interval, 60 * kSecond);
  EXPECT_EQ(f.retrain.min_pairs, 1);
  EXPECT_DOUBLE_EQ(f.retrain.replay, 0.0);
  EXPECT_DOUBLE_EQ(f.retrain.validation, 0.5);
  EXPECT_EQ(f.retrain.iterations, 1);
  EXPECT_EQ(f.retrain.batch, 1);
  EXPECT_DOUBLE_EQ(f.retrain.learning_rate, 0.1);
  EXPECT_DOUBLE_EQ(f.retrain.weight_decay, 1e-4);
  EXPECT_DOUBLE_EQ(f.retrain.clip, 3.0);
  EXPECT_EQ(f.retrain.time_budget, 120 * kSecond);
  EXPECT_DOUBLE_EQ(f.retrain.promote_tolerance, 0.0);
  EXPECT_DOUBLE_EQ(f.monitor.horizon_tol, 0.1);
  EXPECT_DOUBLE_EQ(f.monitor.change_threshold, 1.0);
  EXPECT_DOUBLE_EQ(f.monitor.change_drift, 0.0);
  EXPECT_DOUBLE_EQ(f.health.drift_alert, 1.0);
  EXPECT_DOUBLE_EQ(f.health.drift_alarm, 1.0);
  EXPECT_EQ(f.health.data_age_alert, kSecond);
  EXPECT_EQ(f.health.data_age_alarm, kSecond);
  EXPECT_EQ(f.health.model_age_alert_lyapunov, 0.5);
  EXPECT_EQ(f.health.model_age_alarm_lyapunov, 0.75);
}

TEST(ConfigDefaults, EmptySectionsReadAsDefaults) {
  const Config c = MustParse("listen:\nlimits:\nauth:\n" + FeedWith("    dynamics:\n    model: {}\n"));
  EXPECT_EQ(c.listen.ingest.port, 7301);
  EXPECT_FALSE(c.auth.ingest_token_file.has_value());
  EXPECT_FALSE(c.feeds[0].dynamics.has_value());
  EXPECT_EQ(c.feeds[0].model.hidden, (std::vector<int>{64, 64}));
}

TEST(ConfigDefaults, DurationsAcceptNumbersAsSeconds) {
  EXPECT_EQ(MustParse(FeedWith("    step: 0.25\n")).feeds[0].step, Micros(250'000));
  EXPECT_EQ(MustParse(FeedWith("    step: 2\n")).feeds[0].step, 2 * kSecond);
  EXPECT_EQ(MustParse(FeedWith("    step: 250ms\n")).feeds[0].step, Micros(250'000));
  EXPECT_EQ(MustParse(FeedWith("    step: 1m\n")).feeds[0].step, 60 * kSecond);
}

// --- error classes -------------------------------------------------------------

TEST(ConfigDefaults, HoldIsPerChannelAndDefaultsToNever) {
  EXPECT_EQ(MustParse(FeedWith("")).feeds[0].hold, (std::vector<Micros>{Micros{}, Micros{}}));
  EXPECT_EQ(MustParse(FeedWith("    hold: {y: 90s}\n")).feeds[0].hold, (std::vector<Micros>{Micros{}, 90 * kSecond}));
  ExpectError(FeedWith("    hold: {z: 90s}\n"), 4, "feeds[0].hold.z", {"'z' is not a channel of this feed", "x, y"});
  ExpectError(FeedWith("    hold: {y: -1s}\n"), 4, "feeds[0].hold.y", {});
}

// period: parsed like hold, and independent of it (a period implies no hold).
TEST(ConfigDefaults, PeriodIsPerChannelAndDefaultsToUndeclared) {
  EXPECT_EQ(MustParse(FeedWith("")).feeds[0].period, (std::vector<Micros>{Micros{}, Micros{}}));
  const Config c = MustParse(FeedWith("    period: {y: 5m}\n"));
  EXPECT_EQ(c.feeds[0].period, (std::vector<Micros>{Micros{}, 300 * kSecond}));
  EXPECT_EQ(c.feeds[0].hold, (std::vector<Micros>{Micros{}, Micros{}}));
  EXPECT_EQ(MustParse(FeedWith("    hold: {y: 20m}\n    period: {x: 2, y: 5m}\n")).feeds[0].period,
            (std::vector<Micros>{2 * kSecond, 300 * kSecond}));
  ExpectError(FeedWith("    period: {z: 90s}\n"), 4, "feeds[0].period.z",
              {"'z' is not a channel of this feed; period names channels (x, y)"});
  ExpectError(FeedWith("    period: {y: 0s}\n"), 4, "feeds[0].period.y", {"must be a positive duration", "got '0s'"});
  ExpectError(FeedWith("    period: {y: -1s}\n"), 4, "feeds[0].period.y", {"must be a positive duration"});
  ExpectError(FeedWith("    period: {y: soon}\n"), 4, "feeds[0].period.y", {"duration"});
  ExpectError(FeedWith("    period: {y: 1s,\n             y: 2s}\n"), 5, "feeds[0].period.y",
              {"duplicate key (first at line 4)"});
  ExpectError(FeedWith("    period: 5m\n"), 4, "feeds[0].period", {});
}

TEST(ConfigDefaults, QualityIsPerChannel) {
  const Config c = MustParse(FeedWith("    quality: {y: {range: [-5, 5], bad_values: [-9999, 1e30]}}\n"));
  ASSERT_EQ(c.feeds[0].quality.size(), 2u);
  EXPECT_FALSE(c.feeds[0].quality[0].lo.has_value());
  EXPECT_EQ(c.feeds[0].quality[1].lo, -5.0);
  EXPECT_EQ(c.feeds[0].quality[1].hi, 5.0);
  EXPECT_EQ(c.feeds[0].quality[1].bad_values, (std::vector<double>{-9999, 1e30}));
  ExpectError(FeedWith("    quality: {y: {range: [5, -5]}}\n"), 4, "feeds[0].quality.y.range", {"lo < hi"});
  ExpectError(FeedWith("    quality: {q: {range: [0, 1]}}\n"), 4, "feeds[0].quality.q", {"not a channel"});
  ExpectError(FeedWith("    quality: {y: {limits: [0, 1]}}\n"), 4, "feeds[0].quality.y.limits", {"range, bad_values"});
}

TEST(ConfigErrors, StepExampleFromTheHeader) {
  const Result<Config> r = ParseConfig(FeedWith("    step: -1s\n"), "demo.yaml");
  ASSERT_FALSE(r.ok());
  EXPECT_EQ(r.status().message(),
            "demo.yaml:4: feeds[0].step: must be a positive duration such as 500ms or 2s; got '-1s'");
}

TEST(ConfigErrors, UnknownKeysListTheAllowedOnes) {
  ExpectError(std::string(kMinimal) + "feedz: 1\n", 4, "feedz",
              {"unknown key", "allowed keys at the top level: listen, limits, storage, auth, training, feeds"});
  ExpectError("listen:\n  ingest: 127.0.0.1:1\n  htp: 127.0.0.1:2\n" + std::string(kMinimal), 3, "listen.htp",
              {"unknown key", "allowed keys under listen: ingest, http, allow_remote_without_tokens"});
  ExpectError(FeedWith("    retrain:\n      batchsize: 3\n"), 5, "feeds[0].retrain.batchsize",
              {"allowed keys under feeds[0].retrain:", "batch", "iterations", "promote_tolerance"});
  ExpectError(FeedWith("    dynamics:\n      equations: {x: y, y: x}\n      constraints:\n"
                       "        - {kind: velocity, wieght: 1}\n"),
              7, "feeds[0].dynamics.constraints[0].wieght", {"allowed keys", "kind, weight, anneal"});
  ExpectError(FeedWith("    colour: red\n"), 4, "feeds[0].colour", {"id, channels, units, step, hold, period, quality, dynamics"});
}

TEST(ConfigErrors, DuplicateKeysNameTheSecondLine) {
  ExpectError("listen:\n  http: 127.0.0.1:1\nlisten:\n  http: 127.0.0.1:2\n" + std::string(kMinimal), 3, "listen",
              {"duplicate key (first at line 1)", "only once"});
  ExpectError(FeedWith("    model: {rollout: 2,\n            rollout: 3}\n"), 5, "feeds[0].model.rollout",
              {"duplicate key (first at line 4)"});
  ExpectError(FeedWith("    step: 1s\n    step: 2s\n"), 5, "feeds[0].step", {"duplicate key (first at line 4)"});
}

TEST(ConfigErrors, WrongTypes) {
  ExpectError(FeedWith("    step: {a: 1}\n"), 4, "feeds[0].step",
              {"must be a positive duration such as 500ms or 2s; got a mapping"});
  ExpectError(FeedWith("    retrain: {batch: lots}\n"), 4, "feeds[0].retrain.batch",
              {"must be an integer >= 1; got 'lots'"});
  ExpectError(FeedWith("    retrain: {batch: 2.5}\n"), 4, "feeds[0].retrain.batch",
              {"must be an integer >= 1; got '2.5'"});
  ExpectError(FeedWith("    retrain: {learning_rate: fast}\n"), 4, "feeds[0].retrain.learning_rate",
              {"must be a number > 0; got 'fast'"});
  ExpectError(FeedWith("    retrain: {clip: .inf}\n"), 4, "feeds[0].retrain.clip", {"must be a number > 0"});
  ExpectError("training:\n  lockstep: yes\n" + std::string(kMinimal), 2, "training.lockstep",
              {"must be true or false; got 'yes'"});
  ExpectError("training: [1, 2]\n" + std::string(kMinimal), 1, "training",
              {"must be a mapping with keys threads, lockstep; got a list"});
  ExpectError(FeedWith("    step:\n"), 4, "feeds[0].step", {"must be a positive duration", "got nothing"});
  ExpectError(FeedWith("    model: {hidden: 64}\n"), 4, "feeds[0].model.hidden",
              {"must be a list of at least one hidden layer width >= 1"});
  ExpectError("feeds: {id: a}\n", 1, "feeds", {"must be a list of at least one feed"});
  ExpectError("? [a, b]\n: 1\n" + std::string(kMinimal), 1, "", {"keys must be plain names; got a list as a key"});
}

TEST(ConfigErrors, FeedIdGrammar) {
  ExpectError("feeds:\n  - id: Loop_A\n    channels: [x]\n", 2, "feeds[0].id",
              {"must be an id matching [a-z0-9][a-z0-9_-]{0,63}", "got 'Loop_A'"});
  ExpectError("feeds:\n  - id: -a\n    channels: [x]\n", 2, "feeds[0].id", {"[a-z0-9][a-z0-9_-]{0,63}"});
  ExpectError("feeds:\n  - channels: [x]\n", 2, "feeds[0].id", {"missing", "id such as loop-a"});
  ExpectError("feeds:\n  - id: a\n    channels: [x]\n  - id: b\n    channels: [x]\n  - id: a\n    channels: [x]\n", 6,
              "feeds[2].id", {"duplicate feed id 'a' (also feeds[0].id)", "must be unique"});
}

TEST(ConfigErrors, ChannelGrammarAndCount) {
  ExpectError("feeds:\n  - id: a\n    channels: [x, 2y]\n", 3, "feeds[0].channels[1]",
              {"must be a name matching [A-Za-z_][A-Za-z0-9_]{0,63}", "got '2y'"});
  ExpectError("feeds:\n  - id: a\n    channels: [x, t]\n", 3, "feeds[0].channels[1]", {"other than 't'", "got 't'"});
  ExpectError("feeds:\n  - id: a\n    channels:\n      - x\n      - y\n      - x\n", 6, "feeds[0].channels[2]",
              {"duplicate channel name 'x' (also feeds[0].channels[0])", "unique within a feed"});
  ExpectError("feeds:\n  - id: a\n    channels: []\n", 3, "feeds[0].channels",
              {"has 0 channels", "a list of 1 to 64 channel names"});
  std::string many = "feeds:\n  - id: a\n    channels: [";
  for (int i = 0; i < 65; ++i) many += (i ? ", c" : "c") + std::to_string(i);
  ExpectError(many + "]\n", 3, "feeds[0].channels", {"has 65 channels", "1 to 64"});
  ExpectError("feeds:\n  - id: a\n", 2, "feeds[0].channels", {"missing", "list the feed's channels"});
}

TEST(ConfigErrors, UnitsOnePerChannel) {
  ExpectError(FeedWith("    units: [m]\n"), 4, "feeds[0].units",
              {"has 1 units but the feed has 2 channels", "one unit per channel", "leave units out"});
  EXPECT_TRUE(MustParse(FeedWith("    units: []\n")).feeds[0].units.empty());
}

TEST(ConfigErrors, DurationsAndSizes) {
  ExpectError(FeedWith("    step: 0\n"), 4, "feeds[0].step", {"must be a positive duration", "got '0'"});
  ExpectError("storage: {retention: 6 hours}\n" + std::string(kMinimal), 1, "storage.retention",
              {"must be a positive duration such as 500ms or 2s; got '6 hours'"});
  ExpectError("limits: {max_future_skew: -1s}\n" + std::string(kMinimal), 1, "limits.max_future_skew",
              {"must be a duration >= 0"});
  ExpectError("limits: {idle_timeout: 100000d}\n" + std::string(kMinimal), 1, "limits.idle_timeout",
              {"must be at most 3650d"});
  ExpectError("limits: {max_line: 64KB}\n" + std::string(kMinimal), 1, "limits.max_line",
              {"must be a size from 1 byte to 1GiB such as 65536 or 64KiB", "got '64KB'"});
  ExpectError("limits: {max_line: 0}\n" + std::string(kMinimal), 1, "limits.max_line", {"must be a size from 1"});
  ExpectError(FeedWith("    health: {data_age_alert: soon}\n"), 4, "feeds[0].health.data_age_alert",
              {"positive duration", "got 'soon'"});
}

struct RangeCase {
  const char* name;
  std::string yaml;
  int line;
  const char* path;
  const char* allowed;
};

class ConfigRangeErrors : public ::testing::TestWithParam<RangeCase> {};

TEST_P(ConfigRangeErrors, NameKeyLineAndAllowedRange) {
  const RangeCase& c = GetParam();
  ExpectError(c.yaml, c.line, c.path, {c.allowed});
}

const std::string kTop = kMinimal;  // top-level sections go before it on line 1

INSTANTIATE_TEST_SUITE_P(
    All, ConfigRangeErrors,
    ::testing::Values(
        RangeCase{"threads", "training: {threads: 0}\n" + kTop, 1, "training.threads", "an integer >= 1; got '0'"},
        RangeCase{"commit_batch", "limits: {commit_batch: 0}\n" + kTop, 1, "limits.commit_batch", "an integer >= 1"},
        RangeCase{"max_connections", "limits: {max_connections: -3}\n" + kTop, 1, "limits.max_connections",
                  "an integer >= 1"},
        RangeCase{"commit_every", "limits: {commit_every: 0ms}\n" + kTop, 1, "limits.commit_every",
                  "positive duration"},
        RangeCase{"keep_models", "storage: {keep_models: -1}\n" + kTop, 1, "storage.keep_models", "an integer >= 0"},
        RangeCase{"int_overflow", "storage: {keep_models: 99999999999}\n" + kTop, 1, "storage.keep_models",
                  "an integer >= 0"},
        RangeCase{"iterations", FeedWith("    retrain: {iterations: 0}\n"), 4, "feeds[0].retrain.iterations",
                  "an integer >= 1"},
        RangeCase{"batch", FeedWith("    retrain: {batch: 0}\n"), 4, "feeds[0].retrain.batch", "an integer >= 1"},
        RangeCase{"strategy", FeedWith("    retrain: {strategy: genetic}\n"), 4, "feeds[0].retrain.strategy",
                  "supervised (the only training strategy so far); got 'genetic'"},
        RangeCase{"min_pairs", FeedWith("    retrain: {min_pairs: 0}\n"), 4, "feeds[0].retrain.min_pairs",
                  "an integer >= 1"},
        RangeCase{"replay", FeedWith("    retrain: {replay: 1}\n"), 4, "feeds[0].retrain.replay",
                  "a number in [0, 1); got '1'"},
        RangeCase{"validation", FeedWith("    retrain: {validation: 0}\n"), 4, "feeds[0].retrain.validation",
                  "a number in (0, 1); got '0'"},
        RangeCase{"lyapunov_fraction", FeedWith("    retrain: {lyapunov_fraction: 0}\n"), 4,
                  "feeds[0].retrain.lyapunov_fraction", "a number > 0"},
        RangeCase{"learning_rate", FeedWith("    retrain: {learning_rate: -1e-3}\n"), 4,
                  "feeds[0].retrain.learning_rate", "a number > 0"},
        RangeCase{"weight_decay", FeedWith("    retrain: {weight_decay: -1}\n"), 4, "feeds[0].retrain.weight_decay",
                  "a number >= 0"},
        RangeCase{"clip", FeedWith("    retrain: {clip: 0}\n"), 4, "feeds[0].retrain.clip", "a number > 0"},
        RangeCase{"time_budget", FeedWith("    retrain: {time_budget: 0s}\n"), 4, "feeds[0].retrain.time_budget",
                  "positive duration"},
        RangeCase{"promote_tolerance", FeedWith("    retrain: {promote_tolerance: -0.1}\n"), 4,
                  "feeds[0].retrain.promote_tolerance", "a number >= 0"},
        RangeCase{"interval_order", FeedWith("    retrain:\n      min_interval: 2h\n      max_interval: 1h\n"), 5,
                  "feeds[0].retrain.min_interval",
                  "min_interval (2h) is above max_interval (1h); min_interval must be <= max_interval"},
        RangeCase{"interval_order_default", FeedWith("    retrain:\n      max_interval: 10s\n"), 5,
                  "feeds[0].retrain.max_interval", "min_interval must be <= max_interval"},
        RangeCase{"hidden_empty", FeedWith("    model: {hidden: []}\n"), 4, "feeds[0].model.hidden",
                  "at least one hidden layer width >= 1"},
        RangeCase{"hidden_zero", FeedWith("    model: {hidden: [64, 0]}\n"), 4, "feeds[0].model.hidden[1]",
                  "an integer >= 1; got '0'"},
        RangeCase{"activation", FeedWith("    model: {activation: relu}\n"), 4, "feeds[0].model.activation",
                  "must be tanh or silu; got 'relu'"},
        RangeCase{"rollout", FeedWith("    model: {rollout: 0}\n"), 4, "feeds[0].model.rollout", "an integer >= 1"},
        RangeCase{"family", FeedWith("    model: {family: spline}\n"), 4, "feeds[0].model.family",
                  "must be neural, polynomial or auto; got 'spline'"},
        RangeCase{"degree", FeedWith("    model: {degree: 7}\n"), 4, "feeds[0].model.degree",
                  "must be auto or a polynomial degree from 1 to 6; got '7'"},
        RangeCase{"denoise", FeedWith("    model: {denoise: yes}\n"), 4, "feeds[0].model.denoise",
                  "must be auto or off; got 'yes'"},
        RangeCase{"degree_text", FeedWith("    model: {degree: high}\n"), 4, "feeds[0].model.degree",
                  "must be auto or a polynomial degree from 1 to 6; got 'high'"},
        RangeCase{"max_gap", FeedWith("    model: {max_gap: 0}\n"), 4, "feeds[0].model.max_gap", "an integer >= 1"},
        RangeCase{"horizon_tol", FeedWith("    monitor: {horizon_tol: 0}\n"), 4, "feeds[0].monitor.horizon_tol",
                  "a number > 0"},
        RangeCase{"change_drift", FeedWith("    monitor: {change_drift: -1}\n"), 4, "feeds[0].monitor.change_drift",
                  "a number >= 0"},
        RangeCase{"drift_order", FeedWith("    health:\n      drift_alert: 6\n      drift_alarm: 5\n"), 5,
                  "feeds[0].health.drift_alert",
                  "drift_alert (6) is above drift_alarm (5); drift_alert must be <= drift_alarm"},
        RangeCase{"data_age_order", FeedWith("    health:\n      data_age_alert: 10m\n"), 5,
                  "feeds[0].health.data_age_alert", "data_age_alert (10m) is above data_age_alarm (5m)"},
        RangeCase{"model_age_order",
                  FeedWith("    health: {model_age_alert_lyapunov: 3, model_age_alarm_lyapunov: 1}\n"), 4,
                  "feeds[0].health.model_age_alert_lyapunov",
                  "model_age_alert_lyapunov must be <= model_age_alarm_lyapunov"},
        RangeCase{"renamed_warn", FeedWith("    health: {drift_warn: 3}\n"), 4, "feeds[0].health.drift_warn",
                  "renamed to drift_alert"},
        RangeCase{"renamed_crit", FeedWith("    health:\n      model_age_crit_lyapunov: 3\n"), 5,
                  "feeds[0].health.model_age_crit_lyapunov", "renamed to model_age_alarm_lyapunov"},
        RangeCase{"anneal_mid",
                  FeedWith("    dynamics:\n      equations: {x: y, y: x}\n      constraints:\n"
                           "        - {kind: velocity, anneal: {mid: 1.5}}\n"),
                  7, "feeds[0].dynamics.constraints[0].anneal.mid", "a number in [0, 1]; got '1.5'"},
        RangeCase{"anneal_width",
                  FeedWith("    dynamics:\n      equations: {x: y, y: x}\n      constraints:\n"
                           "        - {kind: velocity, anneal: {width: 0}}\n"),
                  7, "feeds[0].dynamics.constraints[0].anneal.width", "a number > 0"},
        RangeCase{"weight",
                  FeedWith("    dynamics:\n      equations: {x: y, y: x}\n      constraints:\n"
                           "        - {kind: residual, weight: -1}\n"),
                  7, "feeds[0].dynamics.constraints[0].weight", "a number >= 0; got '-1'"},
        RangeCase{"time_unit", FeedWith("    dynamics:\n      time_unit: 0s\n      equations: {x: y, y: x}\n"), 5,
                  "feeds[0].dynamics.time_unit", "positive duration"}),
    [](const ::testing::TestParamInfo<RangeCase>& info) { return std::string(info.param.name); });

TEST(ConfigErrors, Endpoints) {
  const auto listen = [](const std::string& v) { return "listen:\n  ingest: " + v + "\n" + std::string(kMinimal); };
  for (const char* bad : {"127.0.0.1:70000", "127.0.0.1", "\"::1:7301\"", "example.com:80", "\":7301\"", "127.0.0.1:x",
                          "\"[::1]7301\"", "\"[127.0.0.1]:1\"", "7301", "256.0.0.1:1"}) {
    ExpectError(listen(bad), 2, "listen.ingest",
                {"must be host:port with an IPv4 address, a bracketed IPv6 address or localhost and a port 0..65535",
                 "127.0.0.1:7301"});
  }
  ExpectError("listen:\n  http: [1, 2]\n" + std::string(kMinimal), 2, "listen.http", {"got a list"});
  EXPECT_EQ(MustParse(listen("\"[::1]:7301\"")).listen.ingest.host, "::1");
  EXPECT_EQ(MustParse(listen("LocalHost:65535")).listen.ingest.port, 65535);
  EXPECT_EQ(MustParse(listen("127.0.0.1:0")).listen.ingest.port, 0);
  // An unquoted [v6]:port is a YAML flow list followed by junk: a syntax error
  // whose message says to quote it.
  ExpectError(listen("[::1]:7301"), 2, "", {"YAML syntax error", "\"[::1]:7301\""});
}

TEST(ConfigErrors, Dynamics) {
  const std::string head = FeedWith("    dynamics:\n");
  ExpectError(head + "      equations: {x: \"y\"}\n", 5, "feeds[0].dynamics.equations",
              {"no equation for channel 'y'", "exactly one expression per channel (x, y)"});
  ExpectError(head + "      equations:\n        x: y\n        y: x\n        z: x\n", 8, "feeds[0].dynamics.equations.z",
              {"'z' is not a channel of this feed", "keyed by channel: x, y"});
  ExpectError(head + "      equations:\n        x: y\n        x: x\n", 7, "feeds[0].dynamics.equations.x",
              {"duplicate key (first at line 6)"});
  ExpectError(head + "      equations: {x: \" \", y: x}\n", 5, "feeds[0].dynamics.equations.x",
              {"must be a non-empty expression", "got ' '"});
  ExpectError(head + "      equations: {x: {a: 1}, y: x}\n", 5, "feeds[0].dynamics.equations.x",
              {"must be a non-empty expression", "got a mapping"});
  ExpectError(head + "      time_unit: 1s\n", 4, "feeds[0].dynamics.equations",
              {"missing", "one expression per channel (x, y)"});
  ExpectError(head + "      equations: [x, y]\n", 5, "feeds[0].dynamics.equations", {"must be a mapping; got a list"});
}

TEST(ConfigErrors, Constants) {
  const std::string head = FeedWith("    dynamics:\n      equations: {x: y, y: x}\n      constants:\n");
  ExpectError(head + "        k: 1\n        2pi: 6.28\n", 8, "feeds[0].dynamics.constants.2pi",
              {"'2pi' is not a valid constant name", "[A-Za-z_][A-Za-z0-9_]{0,63}"});
  ExpectError(head + "        x: 1\n", 7, "feeds[0].dynamics.constants.x",
              {"'x' is also a channel name", "differ from the channels (x, y) and from 't'"});
  ExpectError(head + "        t: 1\n", 7, "feeds[0].dynamics.constants.t", {"other than 't'"});
  ExpectError(head + "        k: ten\n", 7, "feeds[0].dynamics.constants.k", {"must be a finite number; got 'ten'"});
  ExpectError(head + "        k: 1\n        k: 2\n", 8, "feeds[0].dynamics.constants.k", {"duplicate key"});
}

TEST(ConfigErrors, Constraints) {
  const std::string head = FeedWith("    dynamics:\n      equations: {x: y, y: x}\n      constraints:\n");
  ExpectError(head + "        - {kind: energy}\n", 7, "feeds[0].dynamics.constraints[0].kind",
              {"must be velocity or residual; got 'energy'"});
  ExpectError(head + "        - {weight: 1}\n", 7, "feeds[0].dynamics.constraints[0].kind",
              {"missing", "velocity or residual"});
  ExpectError(head + "        - {kind: velocity}\n        - {kind: velocity}\n", 8, "feeds[0].dynamics.constraints[1]",
              {"second 'velocity' constraint", "at most once"});
  ExpectError(head + "        - velocity\n", 7, "feeds[0].dynamics.constraints[0]",
              {"must be a mapping with keys kind, weight, anneal; got 'velocity'"});
}

TEST(ConfigErrors, FeedsListAndDocumentShape) {
  ExpectError("feeds: []\n", 1, "feeds", {"must be a list of at least one feed"});
  ExpectError("training: {threads: 1}\n", 1, "feeds", {"missing", "at least one feed"});
  ExpectError("", 1, "", {"the config is empty", "feeds"});
  ExpectError("# nothing but a comment\n", 1, "", {"the config is empty"});
  ExpectError("- a\n- b\n", 1, "",
              {"must be a mapping with the keys listen, limits, storage, auth, training, feeds", "got a list"});
  ExpectError("just text\n", 1, "", {"must be a mapping", "got 'just text'"});
  ExpectError(std::string(kMinimal) + "---\n" + kMinimal, 5, "", {"second YAML document"});
}

TEST(ConfigErrors, YamlSyntaxErrorsCarryTheLine) {
  ExpectError("feeds:\n  - id: a\n    channels: [x, y\n", 4, "", {"YAML syntax error"});
  ExpectError("listen:\n  ingest: 127.0.0.1:1\n   http: 127.0.0.1:2\n" + std::string(kMinimal), 3, "",
              {"YAML syntax error", "illegal map value"});
  ExpectError("feeds: a: b\n", 1, "", {"YAML syntax error", "check indentation and quoting"});
}

TEST(ConfigErrors, RemoteListenersNeedTokens) {
  ExpectError("listen:\n  ingest: 0.0.0.0:7301\n" + std::string(kMinimal), 2, "listen.ingest",
              {"0.0.0.0:7301 is not a loopback address", "set auth.ingest_token_file",
               "listen.allow_remote_without_tokens: true"});
  ExpectError("listen:\n  http: \"[::]:7302\"\nauth: {read_token_file: r}\n" + std::string(kMinimal), 2, "listen.http",
              {"[::]:7302 is not a loopback address", "auth.admin_token_file is not set", "set auth.admin_token_file"});
  ExpectError("listen:\n  http: 10.0.0.5:7302\n" + std::string(kMinimal), 2, "listen.http",
              {"auth.read_token_file and auth.admin_token_file are not set"});
  // Tokens or the explicit opt-in make it valid; loopback never needs tokens.
  EXPECT_TRUE(
      ParseConfig("listen:\n  ingest: 0.0.0.0:7301\nauth: {ingest_token_file: i}\n" + std::string(kMinimal), "t.yaml")
          .ok());
  EXPECT_TRUE(ParseConfig("listen:\n  http: 0.0.0.0:1\nauth: {read_token_file: r, admin_token_file: a}\n" +
                              std::string(kMinimal),
                          "t.yaml")
                  .ok());
  EXPECT_TRUE(ParseConfig("listen:\n  ingest: 0.0.0.0:1\n  http: 0.0.0.0:2\n  allow_remote_without_tokens: true\n" +
                              std::string(kMinimal),
                          "t.yaml")
                  .ok());
  EXPECT_TRUE(
      ParseConfig("listen:\n  ingest: 127.0.0.2:1\n  http: \"[::1]:2\"\n" + std::string(kMinimal), "t.yaml").ok());
}

TEST(ConfigErrors, EmptyPathsAreRejected) {
  ExpectError("storage: {path: \"\"}\n" + std::string(kMinimal), 1, "storage.path",
              {"must be a non-empty file path such as var/lyapcast.db; got ''"});
  ExpectError("auth:\n  admin_token_file:\n" + std::string(kMinimal), 2, "auth.admin_token_file",
              {"non-empty file path", "got nothing"});
}

// --- paths and files -----------------------------------------------------------------

TEST(ConfigPaths, RelativePathsResolveAgainstTheConfigFolder) {
  const std::string yaml = "storage: {path: data/x.db}\nauth: {ingest_token_file: keys/i, read_token_file: /abs/r}\n" +
                           std::string(kMinimal);
  const Config c = MustParse(yaml, "/etc/lc/site.yaml");
  EXPECT_EQ(c.storage.path, fs::path("/etc/lc/data/x.db"));
  EXPECT_EQ(*c.auth.ingest_token_file, fs::path("/etc/lc/keys/i"));
  EXPECT_EQ(*c.auth.read_token_file, fs::path("/abs/r"));
  EXPECT_EQ(MustParse(kMinimal, "/etc/lc/site.yaml").storage.path, fs::path("/etc/lc/var/lyapcast.db"));
  EXPECT_EQ(MustParse(yaml, "").storage.path, fs::path("data/x.db"));
  EXPECT_EQ(MustParse(yaml, "site.yaml").storage.path, fs::path("data/x.db"));
  // ":memory:" is an ordinary relative file name here.
  EXPECT_EQ(MustParse("storage: {path: \":memory:\"}\n" + std::string(kMinimal), "/c/x.yaml").storage.path,
            fs::path("/c/:memory:"));
}

class ConfigFileTest : public ::testing::Test {
 protected:
  void SetUp() override {
    const auto* info = ::testing::UnitTest::GetInstance()->current_test_info();
    dir_ = fs::temp_directory_path() / ("lyapcast_config_test_" + std::to_string(::getpid()) + "_" + info->name());
    fs::remove_all(dir_);
    fs::create_directories(dir_);
  }
  void TearDown() override { fs::remove_all(dir_); }
  fs::path Write(const std::string& name, const std::string& text) {
    const fs::path p = dir_ / name;
    std::ofstream(p) << text;
    return p;
  }
  fs::path dir_;
};

TEST_F(ConfigFileTest, LoadResolvesRelativePaths) {
  const fs::path file = Write("site.yaml", "auth: {admin_token_file: admin.token}\n" + std::string(kMinimal));
  Result<Config> r = LoadConfig(file);
  ASSERT_TRUE(r.ok()) << r.status().ToString();
  EXPECT_EQ(r->source, file);
  EXPECT_EQ(r->storage.path, dir_ / "var/lyapcast.db");
  EXPECT_EQ(*r->auth.admin_token_file, dir_ / "admin.token");
}

TEST_F(ConfigFileTest, LoadErrorsNameTheFile) {
  const fs::path file = Write("bad.yaml", FeedWith("    step: never\n"));
  const Result<Config> r = LoadConfig(file);
  ASSERT_FALSE(r.ok());
  EXPECT_EQ(r.status().code(), StatusCode::kInvalidArgument);
  EXPECT_EQ(r.status().message().rfind(file.string() + ":4: feeds[0].step: must be a positive duration", 0), 0u)
      << r.status().message();
}

TEST_F(ConfigFileTest, MissingFileIsAnIoError) {
  const fs::path file = dir_ / "absent.yaml";
  const Result<Config> r = LoadConfig(file);
  ASSERT_FALSE(r.ok());
  EXPECT_EQ(r.status().code(), StatusCode::kIoError);
  EXPECT_NE(r.status().message().find(file.string()), std::string::npos) << r.status().message();
  EXPECT_NE(r.status().message().find("No such file"), std::string::npos) << r.status().message();
}

TEST_F(ConfigFileTest, DirectoryIsAnIoError) {
  const Result<Config> r = LoadConfig(dir_);
  ASSERT_FALSE(r.ok());
  EXPECT_EQ(r.status().code(), StatusCode::kIoError);
  EXPECT_NE(r.status().message().find("is a directory"), std::string::npos) << r.status().message();
}

// --- small helpers -------------------------------------------------------------------

TEST(ConfigHelpers, LoopbackHosts) {
  for (const char* h : {"127.0.0.1", "127.1.2.3", "127.255.255.255", "::1", "[::1]", "localhost", "LOCALHOST",
                        "::ffff:127.0.0.1", "0:0:0:0:0:0:0:1"}) {
    EXPECT_TRUE(IsLoopbackHost(h)) << h;
  }
  for (const char* h : {"0.0.0.0", "::", "10.0.0.1", "128.0.0.1", "192.168.1.2", "::2", "::ffff:10.0.0.1",
                        "localhost.example", "", "127.0.0", "example.com"}) {
    EXPECT_FALSE(IsLoopbackHost(h)) << h;
  }
}

TEST(ConfigHelpers, FeedIdGrammar) {
  for (const char* id : {"a", "0", "loop-a", "rig_b", "9-x_", "abc-123"}) EXPECT_TRUE(IsValidFeedId(id)) << id;
  for (const char* id : {"", "-a", "_a", "A", "loop.a", "loop a", "lööp", "a/b"}) {
    EXPECT_FALSE(IsValidFeedId(id)) << id;
  }
  EXPECT_TRUE(IsValidFeedId(std::string(64, 'a')));
  EXPECT_FALSE(IsValidFeedId(std::string(65, 'a')));
}

TEST(ConfigHelpers, ChannelNameGrammar) {
  for (const char* n : {"x", "_", "_a", "Flow2", "dtemp_h", "T", "tt", "t0"}) EXPECT_TRUE(IsValidChannelName(n)) << n;
  for (const char* n : {"", "t", "2x", "a-b", "a b", "a.b", "é"}) EXPECT_FALSE(IsValidChannelName(n)) << n;
  EXPECT_TRUE(IsValidChannelName(std::string(64, 'c')));
  EXPECT_FALSE(IsValidChannelName(std::string(65, 'c')));
}

TEST(ConfigHelpers, NamesAndIndexes) {
  EXPECT_STREQ(ConstraintKindName(ConstraintKind::kVelocity), "velocity");
  EXPECT_STREQ(ConstraintKindName(ConstraintKind::kResidual), "residual");
  EXPECT_STREQ(ActivationName(Activation::kTanh), "tanh");
  EXPECT_STREQ(ActivationName(Activation::kSilu), "silu");
  EXPECT_EQ((Endpoint{"10.1.2.3", 80}).ToString(), "10.1.2.3:80");
  EXPECT_EQ((Endpoint{"fe80::1", 0}).ToString(), "[fe80::1]:0");
  const Config c = MustParse(kMinimal);
  EXPECT_EQ(c.FeedIndex("a"), 0);
  EXPECT_EQ(c.FeedIndex("b"), -1);
  EXPECT_EQ(c.feeds[0].ChannelIndex("y"), 1);
  EXPECT_EQ(c.feeds[0].ChannelIndex("z"), -1);
}

TEST(ConfigHelpers, DescribeSummarizes) {
  Result<Config> r = LoadConfig(fs::path(kSourceDir) / "config" / "demo.yaml");
  ASSERT_TRUE(r.ok()) << r.status().ToString();
  const std::string s = DescribeConfig(*r);
  for (const char* f : {"listen: ingest 127.0.0.1:7301, http 127.0.0.1:7302", "lyapcast.db", "retention 2h",
                        "loop-a: flow [m/s], dtemp_h [K], dtemp_v [K]; step 200ms; dynamics known",
                        "constraints: velocity, residual", "rig-b:", "step 100ms", "silu"}) {
    EXPECT_NE(s.find(f), std::string::npos) << "missing '" << f << "' in:\n" << s;
  }
  EXPECT_NE(DescribeConfig(MustParse(kMinimal)).find("a: x, y; step 1s; dynamics unknown"), std::string::npos);
}

}  // namespace
}  // namespace lyapcast
