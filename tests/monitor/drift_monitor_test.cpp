// DriftMonitor on synthetic feeds whose true map is known: the model is a
// hand-built FlowMap<float> G(x) = x + v (zero weights, so N(x) is the last
// layer's bias; with dt = 1 and S = 1, G(x) = x + b). Checks the normalized
// error by hand, what is and is not scored (gaps, trained_to, missing
// channels, late samples, pause), the rolling figures, the drift flag and
// its alarms, and the staleness arithmetic.
#include "monitor/drift_monitor.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstdio>
#include <limits>
#include <vector>

#include "monitor/normal_source.h"

namespace lyapcast {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr Micros kStep{500'000};                   // 0.5 s
constexpr DataTime kT0 = DataTimeFromMicros(1'733'097'600'000'000);     // 2024-12-02T00:00:00Z
constexpr WallTime kWall0 = WallTimeFromMicros(1'733'100'000'000'000);  // wall clock
const Eigen::Vector2f kStd{2.0f, 0.5f};             // the model's s_c

// A two-channel feed with the default change test.
DriftMonitorOptions Feed() {
  DriftMonitorOptions o;
  o.channels = 2;
  o.step = kStep;
  return o;
}

// G(x) = x + v with s = kStd.
std::shared_ptr<const ForecastModel> ShiftModel(Eigen::Vector2f v) {
  auto created = FlowMap<float>::Create(2, {4}, Activation::kTanh, 1.0);
  EXPECT_TRUE(created.ok()) << created.status().ToString();
  FlowMap<float> map = std::move(created.value());  // zero weights: N(x) = b_last
  EXPECT_TRUE(map.SetNormalization(Eigen::Vector2f::Zero(), kStd, Eigen::Vector2f::Ones()).ok());
  map.network().b(map.network().layers() - 1) = v;
  return std::make_shared<const NeuralFlowMap<float>>(std::move(map));
}

// A sample at kT0 + k steps; NaN values are missing.
Sample At(double k, std::vector<double> values) {
  Sample s;
  s.t = kT0 + Micros(std::llround(k * static_cast<double>(kStep.count())));
  for (std::size_t c = 0; c < values.size(); ++c) {
    if (std::isnan(values[c])) s.missing_mask |= std::uint64_t{1} << c;
  }
  s.values = std::move(values);
  return s;
}

// Observes with the wall clock running alongside data time from kWall0.
DriftMonitor::Observation Observe(DriftMonitor& m, const Sample& s) { return m.Observe(s, kWall0 + (s.t - kT0)); }

TEST(DriftMonitor, NormalizedErrorsByHand) {
  DriftMonitor m(Feed());
  ASSERT_TRUE(m.SetModel(ShiftModel({0.25f, -0.5f}), 7, 0.1, kT0, kWall0).ok());
  EXPECT_FALSE(Observe(m, At(0, {1.0, 1.0})).scored);  // at trained_to, and nothing before it
  // pred (1.25, 0.5); z = ((1.25 - 1.65) / 2, (0.5 - 0.4) / 0.5) = (-0.2, 0.2); e = 0.2
  const auto o1 = Observe(m, At(1, {1.65, 0.4}));
  ASSERT_TRUE(o1.scored);
  EXPECT_NEAR(o1.error, 0.2, 1e-6);
  // pred (1.9, -0.1); z = (0, (-0.1 - 0.2) / 0.5) = (0, -0.6); e = sqrt(0.36 / 2) = 0.424264
  const auto o2 = Observe(m, At(2, {1.9, 0.2}));
  ASSERT_TRUE(o2.scored);
  EXPECT_NEAR(o2.error, 0.424264, 1e-6);
  // b missing: pred a = 2.15; z_a = (2.15 - 2.35) / 2 = -0.1; e = 0.1 over the one present channel
  const auto o3 = Observe(m, At(3, {2.35, kNaN}));
  ASSERT_TRUE(o3.scored);
  EXPECT_NEAR(o3.error, 0.1, 1e-6);
  EXPECT_FALSE(o3.alarm_raised);

  const DriftSnapshot d = m.Snapshot(kWall0);
  EXPECT_EQ(d.scored, 3);
  EXPECT_NEAR(*d.last_error, 0.1, 1e-6);
  EXPECT_NEAR(*d.rmse_window, std::sqrt((0.04 + 0.18 + 0.01) / 3), 1e-6);  // sqrt(mean e^2)
  const double alpha = 2.0 / 101;
  double ewma = 0.04;
  ewma += alpha * (0.18 - ewma);
  ewma += alpha * (0.01 - ewma);
  EXPECT_NEAR(*d.rmse_ewma, std::sqrt(ewma), 1e-6);
  EXPECT_FALSE(d.drift_ratio.has_value()) << "fewer than 10 scored";
  EXPECT_EQ(m.e0(), 0.1) << "the validation error until 10 are scored";
  EXPECT_EQ(d.model_version, 7);
  EXPECT_TRUE(d.warming_up);
}

TEST(DriftMonitor, ScoresFromTheStateFormedOneOrMoreStepsBefore) {
  // Step 0.5 s: states are formed by interpolation across up to 0.75 s,
  // else from the nearest sample within 0.125 s (learn/alignment.h).
  DriftMonitor m(Feed());
  ASSERT_TRUE(m.SetModel(ShiftModel({0.0f, 0.0f}), 1, 0.1, kT0 - 10 * kStep, kWall0).ok());
  EXPECT_FALSE(Observe(m, At(0, {1.0, 1.0})).scored) << "nothing before it";
  EXPECT_TRUE(Observe(m, At(2, {1.0, 1.0})).scored) << "a missing step: from sample 0 through G^2";
  EXPECT_TRUE(Observe(m, At(3.1, {1.0, 1.0})).scored) << "10 % late: the state at 2.1 is sample 2 (50 ms away)";
  EXPECT_TRUE(Observe(m, At(3.6, {1.0, 1.0})).scored) << "half a step on: the state at 2.6 is read between 2 and 3.1";
  EXPECT_TRUE(Observe(m, At(4.6, {1.0, kNaN})).scored) << "one channel present";
  EXPECT_TRUE(Observe(m, At(5.6, {1.0, 1.0})).scored) << "the state at 4.6 lacks b: from 3.6 through G^2";
  EXPECT_FALSE(Observe(m, At(6.6, {kNaN, kNaN})).scored) << "nothing present";
  EXPECT_TRUE(Observe(m, At(7.6, {1.0, 1.0})).scored) << "from 5.6 through G^2";
  DriftSnapshot d = m.Snapshot(kWall0);
  EXPECT_EQ(d.scored, 6);
  EXPECT_EQ(d.scored_multi, 3);
  EXPECT_EQ(*d.last_error, 0.0) << "G(x) = x on a constant series";
  EXPECT_DOUBLE_EQ(*d.unscored_s, 0.0);
  // 22.4 steps later: nothing within max_gap (8) steps before it.
  EXPECT_FALSE(Observe(m, At(30, {1.0, 1.0})).scored);
  d = m.Snapshot(kWall0);
  EXPECT_NEAR(*d.unscored_s, 22.4 * 0.5, 1e-9);
  EXPECT_EQ(d.unscored_cause, "no sample in the 8 steps of 500ms before the newest one") << d.unscored_cause;
}

TEST(DriftMonitor, SparseDataAreScoredThroughTheirStepCountAndSaidWhenTooSparse) {
  // One sample every 5 steps: scored through G^5, every time.
  DriftMonitor m(Feed());
  ASSERT_TRUE(m.SetModel(ShiftModel({0.1f, 0.0f}), 1, 0.1, kT0 - kStep, kWall0).ok());
  for (int k = 0; k < 10; ++k) {
    // G^5 adds 0.5 to channel a; the samples do too, so e = 0 once scored.
    const auto o = Observe(m, At(5 * k, {0.5 * k, 1.0}));
    EXPECT_EQ(o.scored, k > 0) << k;
    if (o.scored) {
      EXPECT_NEAR(o.error, 0.0, 1e-6);
    }
  }
  EXPECT_EQ(m.Snapshot(kWall0).scored_multi, 9);
  // Every 10 steps with max_gap 8: never scored, and the snapshot says why.
  DriftMonitor sparse(Feed());
  ASSERT_TRUE(sparse.SetModel(ShiftModel({0.0f, 0.0f}), 1, 0.1, kT0 - kStep, kWall0).ok());
  for (int k = 0; k < 10; ++k) EXPECT_FALSE(Observe(sparse, At(10 * k, {1.0, 1.0})).scored);
  const DriftSnapshot d = sparse.Snapshot(kWall0);
  EXPECT_NEAR(*d.unscored_s, 91 * 0.5, 1e-9) << "from trained_to, one step before the first sample";
  EXPECT_EQ(d.unscored_cause, "samples are about 5s apart, more than model.max_gap 8 steps of 500ms") << d.unscored_cause;
}

TEST(DriftMonitor, ShuffledArrivalsAreScoredOnceTheirPastIsThere) {
  DriftMonitor m(Feed());
  ASSERT_TRUE(m.SetModel(ShiftModel({0.0f, 0.0f}), 1, 0.1, kT0 - kStep, kWall0).ok());
  // Arrival order 0, 2, 1, 4, 3, 5: every sample but the first gets a score
  // (2 first through G^2 from 0; 1 when it comes; 4 through G^2 from 2; 3
  // when it comes; 5 from 4).
  int scored = 0;
  for (int k : {0, 2, 1, 4, 3, 5}) scored += Observe(m, At(k, {1.0, 1.0})).scored ? 1 : 0;
  EXPECT_EQ(scored, 5);
  const DriftSnapshot d = m.Snapshot(kWall0);
  EXPECT_EQ(d.scored, 5);
  EXPECT_EQ(d.scored_late, 2);
}

TEST(DriftMonitor, ALateSampleMakesAWaitingNewerOneScorable) {
  DriftMonitor m(Feed());
  ASSERT_TRUE(m.SetModel(ShiftModel({0.0f, 0.0f}), 1, 0.1, kT0 - kStep, kWall0).ok());
  EXPECT_FALSE(Observe(m, At(0, {1.0, kNaN})).scored);
  EXPECT_FALSE(Observe(m, At(1, {1.0, 1.0})).scored) << "the state before it is incomplete";
  // The other channel of the row at 0 arrives from a second source: the
  // row is merged, and the sample at 1 is scored now.
  const auto merged = Observe(m, At(0, {kNaN, 1.0}));
  EXPECT_FALSE(merged.scored) << "the merged row itself has nothing before it";
  EXPECT_EQ(m.Snapshot(kWall0).scored, 1) << "the sample at 1 was scored";
}

TEST(DriftMonitor, ValuesBeyondFloatRangeDoNotPoisonTheFigures) {
  DriftMonitor m(Feed());
  ASSERT_TRUE(m.SetModel(ShiftModel({0.0f, 0.0f}), 1, 0.1, kT0 - kStep, kWall0).ok());
  Observe(m, At(0, {1.0, 1.0}));
  const auto huge = Observe(m, At(1, {1e39, 1.0}));  // target in double: a huge but finite error
  EXPECT_TRUE(huge.scored);
  EXPECT_NEAR(huge.error / (1e39 / 2 / std::sqrt(2.0)), 1.0, 1e-9);
  EXPECT_FALSE(Observe(m, At(2, {1.0, 1.0})).scored) << "input inf in float: the prediction is not finite";
  EXPECT_TRUE(std::isfinite(*m.Snapshot(kWall0).rmse_ewma));
  EXPECT_TRUE(Observe(m, At(3, {1.0, 1.0})).scored);
}

TEST(DriftMonitor, SamplesUpToTrainedToAreNotScored) {
  DriftMonitor m(Feed());
  ASSERT_TRUE(m.SetModel(ShiftModel({0.0f, 0.0f}), 1, 0.1, kT0 + 3 * kStep, kWall0).ok());
  for (int k = 0; k <= 3; ++k) EXPECT_FALSE(Observe(m, At(k, {1.0, 2.0})).scored) << k;
  EXPECT_TRUE(Observe(m, At(4, {1.0, 2.0})).scored) << "its input may be old, its target is new";
}

TEST(DriftMonitor, LateSamplesCountForDataAgeOnly) {
  DriftMonitor m(Feed());
  ASSERT_TRUE(m.SetModel(ShiftModel({0.0f, 0.0f}), 1, 0.1, kT0 - kStep, kWall0).ok());
  Observe(m, At(0, {1.0, 1.0}));
  Observe(m, At(1, {1.0, 1.0}));
  const auto late = m.Observe(At(0.5, {1.0, 1.0}), kWall0 + 60 * kSecond);
  EXPECT_FALSE(late.scored);
  EXPECT_TRUE(std::isnan(late.error));
  EXPECT_FALSE(m.Observe(At(1, {5.0, 5.0}), kWall0 + 61 * kSecond).scored) << "same time: not newer";
  const DriftSnapshot d = m.Snapshot(kWall0 + 62 * kSecond);
  EXPECT_EQ(d.newest_data_time, kT0 + kStep);
  EXPECT_EQ(d.last_arrival_wall, kWall0 + 61 * kSecond);
  EXPECT_DOUBLE_EQ(*d.data_age_s, 1.0);
  // The late samples did not replace the newest one as the next input.
  EXPECT_TRUE(Observe(m, At(2, {1.0, 1.0})).scored);
  EXPECT_EQ(*m.Snapshot(kWall0).last_error, 0.0);
}

TEST(DriftMonitor, StalenessArithmetic) {
  DriftMonitor m(Feed());
  DriftSnapshot d = m.Snapshot(kWall0);
  EXPECT_FALSE(d.data_age_s || d.model_age_s || d.since_training_s || d.newest_data_time || d.model_version);
  m.Observe(At(0, {1.0, 1.0}), kWall0);
  m.Observe(At(10, {1.0, 1.0}), kWall0 + 2 * kSecond);
  d = m.Snapshot(kWall0 + Micros(8'500'000));
  EXPECT_DOUBLE_EQ(*d.data_age_s, 6.5);
  EXPECT_FALSE(d.model_age_s.has_value());
  EXPECT_FALSE(d.since_training_s.has_value());
  ASSERT_TRUE(m.SetModel(ShiftModel({0.0f, 0.0f}), 3, 0.1, kT0 + 4 * kStep, kWall0 - 90 * kSecond).ok());
  d = m.Snapshot(kWall0 + Micros(8'500'000));
  EXPECT_DOUBLE_EQ(*d.model_age_s, 98.5);        // wall: now - promoted
  EXPECT_DOUBLE_EQ(*d.since_training_s, 3.0);    // data: newest (10 steps) - trained_to (4 steps)
  EXPECT_EQ(d.newest_data_time, kT0 + 10 * kStep);
}

TEST(DriftMonitor, ModelChecksAndNoModel) {
  DriftMonitor m(Feed());
  EXPECT_FALSE(m.has_model());
  EXPECT_TRUE(std::isnan(m.e0()));
  auto three = FlowMap<float>::Create(3, {4}, Activation::kTanh, 1.0);
  ASSERT_TRUE(three.ok());
  auto model3 = std::make_shared<const NeuralFlowMap<float>>(std::move(three.value()));
  const Status wrong = m.SetModel(model3, 2, 0.1, kT0, kWall0);
  EXPECT_EQ(wrong.code(), StatusCode::kInvalidArgument);
  EXPECT_NE(wrong.message().find("3 channels, the feed 2"), std::string::npos) << wrong.message();
  EXPECT_FALSE(m.has_model());
  EXPECT_FALSE(Observe(m, At(0, {1.0, 1.0})).scored);
  EXPECT_FALSE(Observe(m, At(1, {1.0, 1.0})).scored) << "no model";
  ASSERT_TRUE(m.SetModel(ShiftModel({0.0f, 0.0f}), 2, kNaN, kT0 - kStep, kWall0).ok());
  EXPECT_TRUE(Observe(m, At(2, {1.0, 1.0})).scored) << "the kept previous sample is used";
  EXPECT_FALSE(m.Snapshot(kWall0).validation_error.has_value());
  ASSERT_TRUE(m.SetModel(nullptr, 0, 0.0, DataTime{}, WallTime{}).ok());
  EXPECT_FALSE(m.has_model());
  EXPECT_FALSE(m.Snapshot(kWall0).model_version.has_value());
  EXPECT_EQ(m.Snapshot(kWall0).scored, 0);
  EXPECT_FALSE(Observe(m, At(3, {1.0, 1.0})).scored);
}

TEST(DriftMonitor, RollingFiguresAndDriftRatio) {
  DriftMonitor m(Feed());
  ASSERT_TRUE(m.SetModel(ShiftModel({0.0f, 0.0f}), 1, 0.05, kT0 - kStep, kWall0).ok());
  // Channel a steps by +0.2 (z_a = -0.1), b constant: e = sqrt(0.01 / 2).
  double a = 0;
  int k = 0;
  const auto step = [&](double da) {
    a += da;
    return Observe(m, At(k++, {a, 1.0}));
  };
  step(0);
  for (int i = 0; i < 9; ++i) step(0.2);
  EXPECT_FALSE(m.Snapshot(kWall0).drift_ratio.has_value()) << "9 scored";
  EXPECT_EQ(m.e0(), 0.05);
  step(0.2);
  const double e1 = std::sqrt(0.005);
  ASSERT_TRUE(m.Snapshot(kWall0).drift_ratio.has_value());
  // Float predictions of |a| up to 40 round at ~2e-6: tolerances 1e-5.
  EXPECT_NEAR(*m.Snapshot(kWall0).drift_ratio, e1 / 0.05, 1e-4);
  EXPECT_NEAR(m.e0(), e1, 1e-5);
  // 100 samples with twice the error: the window holds only them.
  for (int i = 0; i < 100; ++i) step(0.4);
  const DriftSnapshot d = m.Snapshot(kWall0);
  EXPECT_EQ(d.scored, 110);
  EXPECT_NEAR(*d.rmse_window, 2 * e1, 1e-5);
  // The EWMA still remembers a little of the first 10: (1 - alpha)^100 = 0.138.
  const double w = std::pow(1 - 2.0 / 101, 100);
  EXPECT_NEAR(*d.rmse_ewma, std::sqrt(w * e1 * e1 + (1 - w) * 4 * e1 * e1), 1e-5);
  EXPECT_NEAR(*d.drift_ratio, 2 * e1 / 0.05, 1e-4);
  ASSERT_TRUE(m.SetModel(ShiftModel({0.0f, 0.0f}), 2, 0.0, kT0 - kStep, kWall0).ok());
  for (int i = 0; i < 20; ++i) step(0.2);
  EXPECT_FALSE(m.Snapshot(kWall0).drift_ratio.has_value()) << "validation error 0";
}

// A noisy synthetic process x' = x + v + noise (noise 0.1 s_c per channel,
// so e has RMS 0.1); after `switch_at` samples the map changes to
// x' = x + v + shift.
class Process {
 public:
  explicit Process(std::uint64_t seed) : normal_(seed) {}
  Sample Next(const Eigen::Vector2d& v) {
    for (int c = 0; c < 2; ++c) x_[c] += v[c] + 0.1 * kStd[c] * normal_();
    return At(k_++, {x_[0], x_[1]});
  }

 private:
  testing::NormalSource normal_;
  Eigen::Vector2d x_{0.0, 0.0};
  int k_ = 0;
};

TEST(DriftMonitor, DriftFlagRisesWhenTheProcessChangesAndANewModelClearsIt) {
  DriftMonitor m(Feed());
  ASSERT_TRUE(m.SetModel(ShiftModel({0.25f, -0.5f}), 1, 0.1, kT0 - kStep, kWall0).ok());
  Process p(99);
  // The new map moves both channels by an extra 0.3 s_c per step (a change
  // of the process: one channel alone would read as a failing sensor, see
  // drift_attribution_test.cpp): e's RMS goes from 0.1 to sqrt(0.09 + 0.01) = 0.32.
  const Eigen::Vector2d v{0.25, -0.5}, changed{0.25 + 0.3 * kStd[0], -0.5 + 0.3 * kStd[1]};
  for (int i = 0; i < 400; ++i) EXPECT_FALSE(Observe(m, p.Next(v)).alarm_raised) << i;
  DriftSnapshot d = m.Snapshot(kWall0);
  EXPECT_FALSE(d.drift_flag);
  EXPECT_FALSE(d.warming_up);
  EXPECT_NEAR(*d.drift_ratio, 1.0, 0.3);

  int first = -1;
  DataTime first_t{};
  for (int i = 0; i < 100 && first < 0; ++i) {
    const Sample s = p.Next(changed);
    if (Observe(m, s).alarm_raised) {
      first = i;
      first_t = s.t;
    }
  }
  ASSERT_GE(first, 0) << "not flagged within 100 samples of the change";
  std::printf("drift flagged %d samples after the change\n", first + 1);
  d = m.Snapshot(kWall0);
  EXPECT_TRUE(d.drift_flag);
  EXPECT_EQ(d.flagged_at, first_t);
  EXPECT_EQ(d.alarms, 1);
  EXPECT_EQ(d.change_statistic, 0) << "restarted after the alarm";

  // The change persists: the restarted test alarms again; the flag keeps its time.
  int more = 0;
  for (int i = 0; i < 200; ++i) more += Observe(m, p.Next(changed)).alarm_raised ? 1 : 0;
  EXPECT_GE(more, 2);
  d = m.Snapshot(kWall0);
  EXPECT_EQ(d.alarms, 1 + more);
  EXPECT_EQ(d.flagged_at, first_t);
  EXPECT_NEAR(*d.drift_ratio, 3.2, 0.5);

  // A model of the new map clears the flag and the per-model count; the
  // new regime is in control for it.
  ASSERT_TRUE(m.SetModel(ShiftModel(changed.cast<float>()), 2, 0.1, d.newest_data_time.value(), kWall0).ok());
  d = m.Snapshot(kWall0);
  EXPECT_FALSE(d.drift_flag);
  EXPECT_FALSE(d.flagged_at.has_value());
  EXPECT_EQ(d.alarms, 0);
  EXPECT_EQ(d.alarms_total, 1 + more);
  EXPECT_TRUE(d.warming_up);
  for (int i = 0; i < 500; ++i) EXPECT_FALSE(Observe(m, p.Next(changed)).alarm_raised) << i;
  EXPECT_NEAR(*m.Snapshot(kWall0).drift_ratio, 1.0, 0.3);
}

TEST(DriftMonitor, SuccessorsCarryTheChangeTestSoFrequentRetrainsDoNotBlindIt) {
  // A model replaced every 60 samples (a 2 Hz feed retrained every 30 s)
  // never finishes a 300-sample warm-up if each new model restarts it.
  const Eigen::Vector2d v{0.25, -0.5}, changed{0.25 + 0.3 * kStd[0], -0.5 + 0.3 * kStd[1]};
  const auto run = [&](DriftMonitor::Handover handover) {
    DriftMonitor m(Feed());
    Process p(99);
    std::int64_t version = 1;
    EXPECT_TRUE(m.SetModel(ShiftModel(v.cast<float>()), version, 0.1, kT0 - kStep, kWall0).ok());
    int alarm_at = -1;
    for (int i = 0; i < 1200 && alarm_at < 0; ++i) {
      const Sample s = p.Next(i < 600 ? v : changed);
      if (Observe(m, s).alarm_raised) alarm_at = i;
      if (i % 60 == 59) {  // a cadence retrain promotes a warm-started successor
        EXPECT_TRUE(m.SetModel(ShiftModel(v.cast<float>()), ++version, 0.1, s.t, kWall0, handover).ok());
      }
    }
    return std::pair{alarm_at, m.Snapshot(kWall0)};
  };
  const auto [fresh_alarm, fresh] = run(DriftMonitor::Handover::kFresh);
  EXPECT_EQ(fresh_alarm, -1) << "restarted every 60 samples, the test never leaves its warm-up";
  EXPECT_TRUE(fresh.warming_up);
  const auto [carried_alarm, carried] = run(DriftMonitor::Handover::kSuccessor);
  EXPECT_GE(carried_alarm, 600) << "no alarm before the change";
  EXPECT_LT(carried_alarm, 700) << "flagged within 100 samples of the change";
  EXPECT_TRUE(carried.drift_flag);
  EXPECT_LT(carried.scored, 60) << "the per-model scores still restart";
}

TEST(DriftMonitor, AfterAnAlarmEvenASuccessorRestartsTheChangeTest) {
  DriftMonitor m(Feed());
  ASSERT_TRUE(m.SetModel(ShiftModel({0.25f, -0.5f}), 1, 0.1, kT0 - kStep, kWall0).ok());
  Process p(17);
  const Eigen::Vector2d v{0.25, -0.5}, changed{0.25 + 2.0 * kStd[0], -0.5 + 2.0 * kStd[1]};
  for (int i = 0; i < 350; ++i) Observe(m, p.Next(v));
  ASSERT_FALSE(m.Snapshot(kWall0).warming_up);
  Sample last;
  for (int i = 0; i < 50; ++i) Observe(m, last = p.Next(changed));
  ASSERT_TRUE(m.Snapshot(kWall0).drift_flag);
  // The drift retrain's model, warm-started from the flagged one: the old
  // in-control level says nothing about the new regime.
  ASSERT_TRUE(m.SetModel(ShiftModel(changed.cast<float>()), 2, 0.1, last.t, kWall0,
                         DriftMonitor::Handover::kSuccessor)
                  .ok());
  const DriftSnapshot d = m.Snapshot(kWall0);
  EXPECT_FALSE(d.drift_flag);
  EXPECT_TRUE(d.warming_up);
  EXPECT_EQ(d.change_statistic, 0);
}

TEST(DriftMonitor, PausedMeansNoScoringAndNoAlarm) {
  DriftMonitor m(Feed());
  ASSERT_TRUE(m.SetModel(ShiftModel({0.25f, -0.5f}), 1, 0.1, kT0 - kStep, kWall0).ok());
  Process p(5);
  const Eigen::Vector2d v{0.25, -0.5}, changed{0.25 + 2.0 * kStd[0], -0.5 + 2.0 * kStd[1]};
  for (int i = 0; i < 300; ++i) Observe(m, p.Next(v));
  const std::int64_t scored = m.Snapshot(kWall0).scored;
  m.SetPaused(true);
  Sample last;
  for (int i = 0; i < 300; ++i) {
    last = p.Next(changed);
    const auto o = Observe(m, last);
    EXPECT_FALSE(o.scored || o.alarm_raised) << i;
  }
  DriftSnapshot d = m.Snapshot(kWall0 + (last.t - kT0));
  EXPECT_TRUE(d.paused);
  EXPECT_EQ(d.scored, scored);
  EXPECT_FALSE(d.drift_flag);
  EXPECT_EQ(d.newest_data_time, last.t) << "arrivals are still recorded";
  EXPECT_DOUBLE_EQ(*d.data_age_s, 0.0);
  m.SetPaused(false);
  EXPECT_TRUE(Observe(m, p.Next(changed)).scored) << "scoring resumes at once";
}

TEST(DriftMonitor, ResetClearsTheFlagButKeepsTheModel) {
  DriftMonitor m(Feed());
  ASSERT_TRUE(m.SetModel(ShiftModel({0.25f, -0.5f}), 4, 0.1, kT0 - kStep, kWall0).ok());
  Process p(17);
  const Eigen::Vector2d v{0.25, -0.5}, changed{0.25 + 2.0 * kStd[0], -0.5 + 2.0 * kStd[1]};
  for (int i = 0; i < 350; ++i) Observe(m, p.Next(v));  // past the warm-up (30 blocks of 10)
  for (int i = 0; i < 50; ++i) Observe(m, p.Next(changed));
  ASSERT_TRUE(m.Snapshot(kWall0).drift_flag);
  m.Reset();
  const DriftSnapshot d = m.Snapshot(kWall0);
  EXPECT_FALSE(d.drift_flag);
  EXPECT_EQ(d.scored, 0);
  EXPECT_EQ(d.model_version, 4);
  EXPECT_GE(d.alarms_total, 1);
  EXPECT_TRUE(Observe(m, p.Next(changed)).scored);
}

}  // namespace
}  // namespace lyapcast
