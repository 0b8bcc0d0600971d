// EvaluateHealth: every check at, below and above its thresholds, the
// indeterminate cases, pause, the worst-of rule and the wording of the
// reasons; ModelAgeInForce: configured and cadence-derived model-age levels.
#include "monitor/health.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <string>
#include <vector>

namespace lyapcast {
namespace {

// The config defaults: drift 2 / 5, data age 30s / 5m; model age 2 / 10
// Lyapunov times (the floors of the derived levels, as without an exponent).
const HealthLevels kThresholds{};
const ModelAgeThresholds kModelAge = ModelAgeInForce(kThresholds, std::nullopt);

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
  EXPECT_STREQ(VerdictName(Verdict::kNormal), "normal");
  EXPECT_STREQ(VerdictName(Verdict::kAlert), "alert");
  EXPECT_STREQ(VerdictName(Verdict::kAlarm), "alarm");
  EXPECT_STREQ(VerdictName(Verdict::kIndeterminate), "indeterminate");
  EXPECT_EQ(VerdictExitCode(Verdict::kNormal), 0);
  EXPECT_EQ(VerdictExitCode(Verdict::kAlert), 1);
  EXPECT_EQ(VerdictExitCode(Verdict::kAlarm), 2);
  EXPECT_EQ(VerdictExitCode(Verdict::kIndeterminate), 3);
}

TEST(Verdict, WorseIsNormalThenIndeterminateThenAlertThenAlarm) {
  const Verdict order[] = {Verdict::kNormal, Verdict::kIndeterminate, Verdict::kAlert, Verdict::kAlarm};
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

TEST(EvaluateHealth, HealthyIsNormalWithNoReasons) {
  const HealthResult r = EvaluateHealth(kThresholds, kModelAge, Healthy());
  EXPECT_EQ(r.verdict, Verdict::kNormal) << Describe(r);
  EXPECT_TRUE(r.reasons.empty());
  HealthInputs absent = Healthy();  // values not known yet are not judged
  absent.data_age_s.reset();
  absent.drift_ratio.reset();
  absent.since_training_lyapunov_times.reset();
  EXPECT_EQ(EvaluateHealth(kThresholds, kModelAge, absent).verdict, Verdict::kNormal);
  HealthInputs nan = Healthy();
  nan.data_age_s = nan.drift_ratio = nan.since_training_lyapunov_times = std::nan("");
  EXPECT_EQ(EvaluateHealth(kThresholds, kModelAge, nan).verdict, Verdict::kNormal);
}

TEST(EvaluateHealth, IndeterminateWithoutDataOrModelSaysWhich) {
  HealthInputs in = Healthy();
  in.has_data = false;
  in.data_age_s = 1e6;  // not judged without data
  HealthResult r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kIndeterminate) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"no sample received yet"});

  in = Healthy();
  in.has_model = false;
  in.drift_ratio = 100;  // not judged without a model
  in.drift_flag = true;
  in.since_training_lyapunov_times = 100;
  r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kIndeterminate) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"no model yet"});

  in.has_data = false;
  r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.reasons, (std::vector<std::string>{"no sample received yet", "no model yet"}));
}

TEST(EvaluateHealth, DataAge) {
  HealthInputs in = Healthy();
  in.data_age_s = 29.9;
  EXPECT_EQ(EvaluateHealth(kThresholds, kModelAge, in).verdict, Verdict::kNormal);
  in.data_age_s = 30.0;
  HealthResult r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlert) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"no sample for 30s (data_age_alert 30s)"});
  in.data_age_s = 372.4;
  r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlarm) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"no sample for 6m12s (data_age_alarm 5m)"});
  // Judged without a model too: the data stopping is known either way, and
  // it outranks indeterminate.
  in.has_model = false;
  r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlarm) << Describe(r);
  EXPECT_EQ(r.reasons.size(), 2u);
}

TEST(EvaluateHealth, DriftRatio) {
  HealthInputs in = Healthy();
  in.drift_ratio = 1.999;
  EXPECT_EQ(EvaluateHealth(kThresholds, kModelAge, in).verdict, Verdict::kNormal);
  in.drift_ratio = 2.0;
  HealthResult r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlert) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"drift ratio 2 >= drift_alert 2"});
  in.drift_ratio = 4.9996;
  EXPECT_EQ(EvaluateHealth(kThresholds, kModelAge, in).reasons, std::vector<std::string>{"drift ratio 4.99 >= drift_alert 2"});
  in.drift_ratio = 5.3;
  r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlarm) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"drift ratio 5.3 >= drift_alarm 5"});
}

TEST(EvaluateHealth, DriftFlagAlerts) {
  HealthInputs in = Healthy();
  in.drift_flag = true;
  const HealthResult r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlert) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"drift flag raised by the change test"});
  in.drift_grew = "'y'";
  EXPECT_EQ(EvaluateHealth(kThresholds, kModelAge, in).reasons,
            std::vector<std::string>{"drift flag raised by the change test; the error grew most on 'y'"});
}

TEST(EvaluateHealth, ASensorAtFaultAlertsAndNamesIt) {
  HealthInputs in = Healthy();
  in.sensor_fault = "'x' since T: the one-step error grew on 'y'";
  const HealthResult r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlert) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"suspect sensor 'x' since T: the one-step error grew on 'y'"});
}

// More than 3 declared periods of data time without a reading: silent;
// exactly 3 is not; no declared period never is.
TEST(ChannelSilent, AfterMoreThanThreePeriodsAndOnlyWithAPeriod) {
  EXPECT_FALSE(ChannelSilent(Micros{}, 300 * kSecond));
  EXPECT_FALSE(ChannelSilent(900 * kSecond, 300 * kSecond));
  EXPECT_TRUE(ChannelSilent(900 * kSecond + Micros(1), 300 * kSecond));
  EXPECT_FALSE(ChannelSilent(86400 * kSecond, Micros{}));
}

TEST(EvaluateHealth, SilentChannelsAlertOneReasonEach) {
  HealthInputs in = Healthy();
  in.silent_channels = {{"assay", 1000 * kSecond, 5 * 60 * kSecond}, {"z", Micros(12'500'000), 3 * kSecond}};
  HealthResult r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlert) << Describe(r);
  EXPECT_EQ(r.reasons, (std::vector<std::string>{"channel 'assay' silent: no reading for 16m40s (expected every 5m)",
                                                 "channel 'z' silent: no reading for 12s (expected every 3s)"}));
  // Judged without a model too (a channel can stop before the first one).
  in.has_model = false;
  r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlert) << Describe(r);
  EXPECT_EQ(r.reasons.size(), 3u);
  // Not while paused: a stopped plant's channels are all silent.
  in.paused = true;
  r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.reasons, (std::vector<std::string>{"no model yet", "paused: data age, drift and model age are not judged"}))
      << Describe(r);
}

TEST(EvaluateHealth, ModelAgeInLyapunovTimes) {
  HealthInputs in = Healthy();
  in.since_training_lyapunov_times = 1.99;
  EXPECT_EQ(EvaluateHealth(kThresholds, kModelAge, in).verdict, Verdict::kNormal);
  in.since_training_lyapunov_times = 2.5;
  HealthResult r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlert) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{
                           "2.5 Lyapunov times of data since the model's training chunk >= model_age_alert_lyapunov 2"});
  in.since_training_lyapunov_times = 12.345;
  r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlarm) << Describe(r);
  EXPECT_EQ(r.reasons,
            std::vector<std::string>{
                "12.34 Lyapunov times of data since the model's training chunk >= model_age_alarm_lyapunov 10"});
}

TEST(EvaluateHealth, StorageUnavailableIsAnAlarmEvenWithoutDataOrModel) {
  HealthInputs in = Healthy();
  in.storage_available = false;
  HealthResult r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlarm) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"storage unavailable: samples are not being committed"});
  in.has_data = in.has_model = false;
  r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlarm) << Describe(r);
  EXPECT_EQ(r.reasons.size(), 3u);
}

TEST(EvaluateHealth, PausedJudgesOnlyStorage) {
  HealthInputs in = Healthy();
  in.paused = true;
  in.data_age_s = 86400;
  in.drift_ratio = 100;
  in.drift_flag = true;
  in.since_training_lyapunov_times = 100;
  HealthResult r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kNormal) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"paused: data age, drift and model age are not judged"});
  in.storage_available = false;
  r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlarm) << Describe(r);
  EXPECT_EQ(r.reasons.size(), 2u);
  in = Healthy();
  in.paused = true;
  in.has_model = false;
  EXPECT_EQ(EvaluateHealth(kThresholds, kModelAge, in).verdict, Verdict::kIndeterminate);
}

TEST(EvaluateHealth, WorstOfAllChecksWithEveryReasonListed) {
  HealthInputs in = Healthy();
  in.data_age_s = 45;                     // alert
  in.drift_ratio = 6;                     // alarm
  in.drift_flag = true;                   // alert
  in.since_training_lyapunov_times = 3;   // alert
  HealthResult r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlarm) << Describe(r);
  EXPECT_EQ(r.reasons, (std::vector<std::string>{
                           "no sample for 45s (data_age_alert 30s)",
                           "drift ratio 6 >= drift_alarm 5",
                           "drift flag raised by the change test",
                           "3 Lyapunov times of data since the model's training chunk >= model_age_alert_lyapunov 2",
                       }));
  in.drift_ratio = 1.0;
  r = EvaluateHealth(kThresholds, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlert) << Describe(r);
  EXPECT_EQ(r.reasons.size(), 3u);
}

TEST(EvaluateHealth, ThresholdsComeFromTheCaller) {
  // As `lyapcast check --drift-crit 1.5` would pass them.
  HealthLevels strict;
  strict.drift_alert = 1.2;
  strict.drift_alarm = 1.5;
  strict.data_age_alert = Micros(500'000);
  strict.data_age_alarm = 2 * kSecond;
  HealthInputs in = Healthy();
  in.data_age_s = 0.2;
  in.drift_ratio = 1.3;
  HealthResult r = EvaluateHealth(strict, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlert) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"drift ratio 1.3 >= drift_alert 1.2"});
  in.data_age_s = 2.5;
  r = EvaluateHealth(strict, kModelAge, in);
  EXPECT_EQ(r.verdict, Verdict::kAlarm) << Describe(r);
  EXPECT_EQ(r.reasons.front(), "no sample for 2.5s (data_age_alarm 2s)");
}

TEST(ModelAgeInForce, ConfiguredLevelsWin) {
  HealthLevels h;
  h.model_age_alert_lyapunov = 6;
  h.model_age_alarm_lyapunov = 20;
  const ModelAgeThresholds t = ModelAgeInForce(h, RetrainCycle{30, 60});
  EXPECT_EQ(t.alert, 6);
  EXPECT_EQ(t.alarm, 20);
  EXPECT_FALSE(t.alert_derived);
  EXPECT_FALSE(t.alarm_derived);
}

TEST(ModelAgeInForce, DerivedFromTheRetrainCycleWithFloors) {
  const HealthLevels defaults;
  // A Lorenz-type feed (lambda 0.9/s) under the default cadence: retrains are
  // min_interval 30 s apart = 27 Lyapunov times, the time budget 60 s = 54.
  const ModelAgeThresholds lorenz = ModelAgeInForce(defaults, RetrainCycle{27, 54});
  EXPECT_DOUBLE_EQ(lorenz.alert, 3 * 27 + 54);
  EXPECT_DOUBLE_EQ(lorenz.alarm, 10 * 27 + 54);
  EXPECT_TRUE(lorenz.alert_derived && lorenz.alarm_derived);
  // A slow process paced by lyapunov_fraction 0.5: the floors 2 and 10 apply.
  const ModelAgeThresholds slow = ModelAgeInForce(defaults, RetrainCycle{0.5, 0.1});
  EXPECT_DOUBLE_EQ(slow.alert, 2);
  EXPECT_DOUBLE_EQ(slow.alarm, 10);
  // No positive exponent: the floors.
  EXPECT_DOUBLE_EQ(ModelAgeInForce(defaults, std::nullopt).alert, 2);
  EXPECT_DOUBLE_EQ(ModelAgeInForce(defaults, std::nullopt).alarm, 10);
  EXPECT_FALSE(ModelAgeInForce(defaults, std::nullopt).alert_derived);
}

TEST(ModelAgeInForce, OneConfiguredTheOtherDerivedStayOrdered) {
  HealthLevels h;
  h.model_age_alert_lyapunov = 500;  // above the derived alarm level
  const ModelAgeThresholds t = ModelAgeInForce(h, RetrainCycle{27, 54});
  EXPECT_DOUBLE_EQ(t.alert, 500);
  EXPECT_DOUBLE_EQ(t.alarm, 500);
  HealthLevels g;
  g.model_age_alarm_lyapunov = 1;  // below the derived alert level
  const ModelAgeThresholds u = ModelAgeInForce(g, RetrainCycle{27, 54});
  EXPECT_DOUBLE_EQ(u.alert, 1);
  EXPECT_DOUBLE_EQ(u.alarm, 1);
}

TEST(EvaluateHealth, DefaultConfigFeedRetrainedOnCadenceReadsNormal) {
  // The case that used to read "alert" forever: default thresholds, a
  // healthy model, and the data since training as large as it gets just
  // before a retrain is promoted (one interval plus a job at the time
  // budget), and after one rejected candidate (two intervals).
  const ModelAgeThresholds t = ModelAgeInForce(HealthLevels{}, RetrainCycle{27, 54});
  HealthInputs in = Healthy();
  in.since_training_lyapunov_times = 27 + 54;
  EXPECT_EQ(EvaluateHealth(HealthLevels{}, t, in).verdict, Verdict::kNormal);
  in.since_training_lyapunov_times = 2 * 27 + 54;
  EXPECT_EQ(EvaluateHealth(HealthLevels{}, t, in).verdict, Verdict::kNormal);
  // Retraining stopped: alert, then alarm, and the reason says the level was derived.
  in.since_training_lyapunov_times = 3 * 27 + 54;
  HealthResult r = EvaluateHealth(HealthLevels{}, t, in);
  EXPECT_EQ(r.verdict, Verdict::kAlert) << Describe(r);
  EXPECT_EQ(r.reasons, std::vector<std::string>{"135 Lyapunov times of data since the model's training chunk >= "
                                                "model_age_alert_lyapunov 135 (derived from the retrain cadence)"});
  in.since_training_lyapunov_times = 400;
  EXPECT_EQ(EvaluateHealth(HealthLevels{}, t, in).verdict, Verdict::kAlarm);
}

}  // namespace
}  // namespace lyapcast
