// EvaluateHealth: every check at, below and above its thresholds, the
// UNKNOWN cases, pause, the worst-of rule and the wording of the reasons.
#include "monitor/health.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <string>
#include <vector>

namespace lyapcast {
namespace {

// The config defaults: drift 2 / 5, data age 30s / 5m, model age 2 / 10 Lyapunov times.
const HealthConfig kThresholds{};

// A healthy feed.
HealthInputs Healthy() {
  HealthInputs in;
  in.has_data = true;
  in.has_model = true;
  in.data_age_s = 1.0;
  in.drift_ratio = 1.1;
  in.since_training_lyapunov_times = 0.5;
  return in;
}

// One-line summary for failure messages.
std::string Describe(const HealthResult& r) {
  std::string s = VerdictName(r.verdict);
  for (const std::string& reason : r.reasons) s += " | " + reason;
  return s;
}

TEST(Verdict, NamesAndMonitoringPluginExitCodes) {
  EXPECT_STREQ(VerdictName(Verdict::kOk), "OK");
  EXPECT_STREQ(VerdictName(Verdict::kWarning), "WARNING");
  EXPECT_STREQ(VerdictName(Verdict::kCritical), "CRITICAL");
  EXPECT_STREQ(VerdictName(Verdict::kUnknown), "UNKNOWN");
  EXPECT_EQ(VerdictExitCode(Verdict::kOk), 0);
  EXPECT_EQ(VerdictExitCode(Verdict::kWarning), 1);
  EXPECT_EQ(VerdictExitCode(Verdict::kCritical), 2);
  EXPECT_EQ(VerdictExitCode(Verdict::kUnknown), 3);
}

TEST(Verdict, WorseIsOkThenUnknownThenWarningThenCritical) {
  const Verdict order[] = {Verdict::kOk, Verdict::kUnknown, Verdict::kWarning, Verdict::kCritical};
  for (int i = 0; i < 4; ++i) {
    for (int j = 0; j < 4; ++j) {
      EXPECT_EQ(WorseVerdict(order[i], order[j]), order[std::max(i, j)]) << i << " " << j;
    }
  }
}

TEST(FormatAge, ReadsLikeAClock) {
  EXPECT_EQ(FormatAge(2.57), "2.5s");
  EXPECT_EQ(FormatAge(45.9), "45s");
  EXPECT_EQ(FormatAge(372), "6m12s");
  EXPECT_EQ(FormatAge(299.99), "4m59s") << "truncated, never rounded up to a threshold";
  EXPECT_EQ(FormatAge(300), "5m00s");
  EXPECT_EQ(FormatAge(2 * 3600 + 5 * 60 + 59), "2h05m");
  EXPECT_EQ(FormatAge(3 * 86400 + 4 * 3600 + 7), "3d4h");
  EXPECT_EQ(FormatAge(-3.0), "-3.0s");
  EXPECT_EQ(FormatAge(std::nan("")), "?");
}

TEST(EvaluateHealth, HealthyIsOkWithNoReasons) {
  const HealthResult r = EvaluateHealth(kThresholds, Healthy());
  EXPECT_EQ(r.verdict, Verdict::kOk) << Describe(r);
  EXPECT_TRUE(r.reasons.empty());
  HealthInputs absent = Healthy();  // values not known yet are not judged
  absent.data_age_s.reset();
  absent.drift_ratio.reset();
  absent.since_training_lyapunov_times.reset();
  EXPECT_EQ(EvaluateHealth(kThresholds, absent).verdict, Verdict::kOk);
  HealthInputs nan = Healthy();
  nan.data_age_s = nan.drift_ratio = nan.since_training_lyapunov_times = std::nan("");
  EXPECT_EQ(EvaluateHealth(kThresholds, nan).verdict, Verdict::kOk);
}

TEST(EvaluateHealth, UnknownWithoutDataOrModelSaysWhich) {
  HealthInputs in = Healthy();
  in.has_data = false;
  in.data_age_s = 1e6;  // not judged without data
  HealthResult r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.verdict, Verdict::kUnknown) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"no sample received yet"});

  in = Healthy();
  in.has_model = false;
  in.drift_ratio = 100;  // not judged without a model
  in.drift_flag = true;
  in.since_training_lyapunov_times = 100;
  r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.verdict, Verdict::kUnknown) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"no model yet"});

  in.has_data = false;
  r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.reasons, (std::vector<std::string>{"no sample received yet", "no model yet"}));
}

TEST(EvaluateHealth, DataAge) {
  HealthInputs in = Healthy();
  in.data_age_s = 29.9;
  EXPECT_EQ(EvaluateHealth(kThresholds, in).verdict, Verdict::kOk);
  in.data_age_s = 30.0;
  HealthResult r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.verdict, Verdict::kWarning) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"no sample for 30s (data_age_warn 30s)"});
  in.data_age_s = 372.4;
  r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.verdict, Verdict::kCritical) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"no sample for 6m12s (data_age_crit 5m)"});
  // Judged without a model too: the data stopping is known either way, and
  // it outranks UNKNOWN.
  in.has_model = false;
  r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.verdict, Verdict::kCritical) << Describe(r);
  EXPECT_EQ(r.reasons.size(), 2u);
}

TEST(EvaluateHealth, DriftRatio) {
  HealthInputs in = Healthy();
  in.drift_ratio = 1.999;
  EXPECT_EQ(EvaluateHealth(kThresholds, in).verdict, Verdict::kOk);
  in.drift_ratio = 2.0;
  HealthResult r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.verdict, Verdict::kWarning) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"drift ratio 2 >= drift_warn 2"});
  in.drift_ratio = 4.9996;
  EXPECT_EQ(EvaluateHealth(kThresholds, in).reasons, std::vector<std::string>{"drift ratio 4.99 >= drift_warn 2"});
  in.drift_ratio = 5.3;
  r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.verdict, Verdict::kCritical) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"drift ratio 5.3 >= drift_crit 5"});
}

TEST(EvaluateHealth, DriftFlagWarns) {
  HealthInputs in = Healthy();
  in.drift_flag = true;
  const HealthResult r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.verdict, Verdict::kWarning) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"drift flag raised by the change test"});
}

TEST(EvaluateHealth, ModelAgeInLyapunovTimes) {
  HealthInputs in = Healthy();
  in.since_training_lyapunov_times = 1.99;
  EXPECT_EQ(EvaluateHealth(kThresholds, in).verdict, Verdict::kOk);
  in.since_training_lyapunov_times = 2.5;
  HealthResult r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.verdict, Verdict::kWarning) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{
                           "2.5 Lyapunov times of data since the model's training chunk >= model_age_warn_lyapunov 2"});
  in.since_training_lyapunov_times = 12.345;
  r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.verdict, Verdict::kCritical) << Describe(r);
  EXPECT_EQ(r.reasons,
            std::vector<std::string>{
                "12.34 Lyapunov times of data since the model's training chunk >= model_age_crit_lyapunov 10"});
}

TEST(EvaluateHealth, StorageUnavailableIsCriticalEvenWithoutDataOrModel) {
  HealthInputs in = Healthy();
  in.storage_available = false;
  HealthResult r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.verdict, Verdict::kCritical) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"storage unavailable: samples are not being committed"});
  in.has_data = in.has_model = false;
  r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.verdict, Verdict::kCritical) << Describe(r);
  EXPECT_EQ(r.reasons.size(), 3u);
}

TEST(EvaluateHealth, PausedJudgesOnlyStorage) {
  HealthInputs in = Healthy();
  in.paused = true;
  in.data_age_s = 86400;
  in.drift_ratio = 100;
  in.drift_flag = true;
  in.since_training_lyapunov_times = 100;
  HealthResult r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.verdict, Verdict::kOk) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"paused: data age, drift and model age are not judged"});
  in.storage_available = false;
  r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.verdict, Verdict::kCritical) << Describe(r);
  EXPECT_EQ(r.reasons.size(), 2u);
  in = Healthy();
  in.paused = true;
  in.has_model = false;
  EXPECT_EQ(EvaluateHealth(kThresholds, in).verdict, Verdict::kUnknown);
}

TEST(EvaluateHealth, WorstOfAllChecksWithEveryReasonListed) {
  HealthInputs in = Healthy();
  in.data_age_s = 45;                     // WARNING
  in.drift_ratio = 6;                     // CRITICAL
  in.drift_flag = true;                   // WARNING
  in.since_training_lyapunov_times = 3;   // WARNING
  HealthResult r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.verdict, Verdict::kCritical) << Describe(r);
  EXPECT_EQ(r.reasons, (std::vector<std::string>{
                           "no sample for 45s (data_age_warn 30s)",
                           "drift ratio 6 >= drift_crit 5",
                           "drift flag raised by the change test",
                           "3 Lyapunov times of data since the model's training chunk >= model_age_warn_lyapunov 2",
                       }));
  in.drift_ratio = 1.0;
  r = EvaluateHealth(kThresholds, in);
  EXPECT_EQ(r.verdict, Verdict::kWarning) << Describe(r);
  EXPECT_EQ(r.reasons.size(), 3u);
}

TEST(EvaluateHealth, ThresholdsComeFromTheCaller) {
  // As `lyapcast check --drift-crit 1.5` would pass them.
  HealthConfig strict;
  strict.drift_warn = 1.2;
  strict.drift_crit = 1.5;
  strict.data_age_warn = 500'000;
  strict.data_age_crit = 2 * kMicrosPerSecond;
  HealthInputs in = Healthy();
  in.data_age_s = 0.2;
  in.drift_ratio = 1.3;
  HealthResult r = EvaluateHealth(strict, in);
  EXPECT_EQ(r.verdict, Verdict::kWarning) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"drift ratio 1.3 >= drift_warn 1.2"});
  in.data_age_s = 2.5;
  r = EvaluateHealth(strict, in);
  EXPECT_EQ(r.verdict, Verdict::kCritical) << Describe(r);
  EXPECT_EQ(r.reasons.front(), "no sample for 2.5s (data_age_crit 2s)");
}

}  // namespace
}  // namespace lyapcast
