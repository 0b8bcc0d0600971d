// Attribution of a drift alarm (monitor/drift_attribution.h) through the
// drift monitor, on a coupled linear process whose map is known exactly:
//
//     x' = x + A x + noise,  A = [[-0.5, 0.5], [-0.5, -0.5]]  (a damped rotation, |eigenvalues of I + A| = 0.71)
//
// driven by Gaussian noise (an Ornstein-Uhlenbeck-like process). The model is
// a FlowMap<float> built to be that map: N(x) = W2 tanh(W1 x) with W1 = eps I
// and W2 = A / eps, linear to within (eps |x|)^2 / 3 (eps = 1e-3).
// Each channel drives the other, so each blind estimate settles: a fault on
// one sensor is explained away by ignoring it; a change in ONE equation (it
// shows in one channel's own error only) is not, and must retrain.
#include <gtest/gtest.h>

#include <cmath>
#include <cstdio>
#include <vector>

#include "monitor/drift_monitor.h"
#include "monitor/normal_source.h"

namespace lyapcast {
namespace {

constexpr Micros kStep{100'000};  // 0.1 s
constexpr DataTime kT0 = DataTimeFromMicros(1'733'097'600'000'000);     // 2024-12-02T00:00:00Z
constexpr WallTime kWall0 = WallTimeFromMicros(1'733'100'000'000'000);

// A with b's equation b' = b + b_from_a a + b_self b.
Eigen::Matrix2d Rotation(double b_from_a, double b_self = -0.5) {
  Eigen::Matrix2d a;
  a << -0.5, 0.5, b_from_a, b_self;
  return a;
}

std::shared_ptr<const ForecastModel> LinearModel(const Eigen::Matrix2d& a) {
  constexpr float kEps = 1e-3f;
  auto created = FlowMap<float>::Create(2, {2}, Activation::kTanh, 1.0);
  EXPECT_TRUE(created.ok()) << created.status().ToString();
  FlowMap<float> map = std::move(created.value());
  EXPECT_TRUE(map.SetNormalization(Eigen::Vector2f::Zero(), Eigen::Vector2f::Ones(), Eigen::Vector2f::Ones()).ok());
  map.network().W(0) = Eigen::Matrix2f::Identity() * kEps;
  map.network().W(1) = a.cast<float>() / kEps;
  map.network().b(0).setZero();
  map.network().b(1).setZero();
  return std::make_shared<const NeuralFlowMap<float>>(std::move(map));
}

class Process {
 public:
  explicit Process(std::uint64_t seed) : normal_(seed) {}
  // The next true state under `a`, as measured with `bias` added.
  Sample Next(const Eigen::Matrix2d& a, Eigen::Vector2d bias = Eigen::Vector2d::Zero()) {
    x_ = x_ + a * x_ + Eigen::Vector2d(0.1 * normal_(), 0.1 * normal_());
    Sample s;
    s.t = kT0 + k_++ * kStep;
    s.values = {x_[0] + bias[0], x_[1] + bias[1]};
    return s;
  }

 private:
  testing::NormalSource normal_;
  Eigen::Vector2d x_{0.0, 0.0};
  std::int64_t k_ = 0;
};

struct Outcome {
  int process_alarm = -1;  // samples after the change
  int sensor_alarm = -1;
  int sensor_channel = -1;
  DriftSnapshot last;
};

// 1200 samples of the model's own process, then `after` samples from `next`.
template <typename Next>
Outcome RunScenario(int after, Next next) {
  DriftMonitorOptions o;
  o.channels = 2;
  o.step = kStep;
  DriftMonitor m(o);
  EXPECT_TRUE(m.SetModel(LinearModel(Rotation(-0.5)), 1, 0.1, kT0 - kStep, kWall0).ok());
  Process p(2024);
  Outcome out;
  for (int i = 0; i < 1200; ++i) {
    const Sample smp = p.Next(Rotation(-0.5));
    const auto seen = m.Observe(smp, kWall0);
    EXPECT_FALSE(seen.alarm_raised || seen.sensor_alarm >= 0) << "in control, sample " << i;
  }
  const DriftSnapshot before = m.Snapshot(kWall0);
  EXPECT_FALSE(before.warming_up);
  EXPECT_TRUE(before.channels.at(0).blind_ratio.has_value()) << "the blind estimates settled";
  for (int i = 0; i < after; ++i) {
    const auto seen = m.Observe(next(p, i), kWall0);
    if (seen.alarm_raised && out.process_alarm < 0) out.process_alarm = i;
    if (seen.sensor_alarm >= 0 && out.sensor_alarm < 0) {
      out.sensor_alarm = i;
      out.sensor_channel = seen.sensor_alarm;
    }
  }
  out.last = m.Snapshot(kWall0);
  return out;
}

TEST(DriftAttribution, ABiasedSensorIsNamedAndRaisesNoDriftFlag) {
  // Sensor b reads 1.0 high: the predictions of a (which reads b through
  // A[0][1] = 0.5) and of b itself (its own term -0.5 x bias) are both off,
  // so both channels' own errors grow: which channel grew does not say
  // which sensor failed. Ignoring b explains it; ignoring a does not.
  const Outcome o = RunScenario(300, [](Process& p, int) { return p.Next(Rotation(-0.5), {0.0, 1.0}); });
  std::printf("bias on b: sensor alarm after %d samples, process alarm %d\n", o.sensor_alarm, o.process_alarm);
  EXPECT_EQ(o.process_alarm, -1);
  ASSERT_GE(o.sensor_alarm, 0);
  EXPECT_EQ(o.sensor_channel, 1);
  EXPECT_FALSE(o.last.drift_flag);
  ASSERT_TRUE(o.last.sensor_fault.has_value());
  EXPECT_EQ(o.last.sensor_fault->channel, 1);
  ASSERT_TRUE(o.last.last_alarm.has_value());
  EXPECT_EQ(o.last.last_alarm->kind, DriftAttribution::Kind::kSensor);
  EXPECT_EQ(o.last.last_alarm->grew, (std::vector<int>{0, 1}));
}

TEST(DriftAttribution, AChangeInOneEquationIsAProcessChange) {
  // Only b's equation changes (A[1][0] -0.5 -> -1.0, A[1][1] -0.5 -> -0.2;
  // |eigenvalues of I + A| 0.95, still stable): only b's own one-step
  // error grows, yet the model is wrong, not the sensor.
  const Outcome o = RunScenario(300, [](Process& p, int) { return p.Next(Rotation(-1.0, -0.2)); });
  std::printf("change of b's equation: process alarm after %d samples, sensor alarm %d\n", o.process_alarm,
              o.sensor_alarm);
  EXPECT_EQ(o.sensor_alarm, -1);
  ASSERT_GE(o.process_alarm, 0);
  EXPECT_TRUE(o.last.drift_flag);
  EXPECT_FALSE(o.last.sensor_fault.has_value());
  ASSERT_TRUE(o.last.last_alarm.has_value());
  EXPECT_EQ(o.last.last_alarm->kind, DriftAttribution::Kind::kProcessChange);
  EXPECT_EQ(o.last.last_alarm->grew, std::vector<int>{1});
}

TEST(DriftAttribution, ASlowDriftOfOneSensorIsNamed) {
  // Calibration drift: sensor a's offset ramps by 0.004 per sample (2.0
  // after 500 samples). Early alarms, below a doubling, are pending.
  const Outcome o = RunScenario(500, [](Process& p, int i) { return p.Next(Rotation(-0.5), {0.004 * i, 0.0}); });
  std::printf("drift of a: sensor alarm after %d samples, process alarm %d\n", o.sensor_alarm, o.process_alarm);
  EXPECT_EQ(o.process_alarm, -1);
  ASSERT_GE(o.sensor_alarm, 0);
  EXPECT_EQ(o.sensor_channel, 0);
}

TEST(DriftAttribution, ASmallBiasIsNotNamedOnWeakEvidence) {
  // Sensor b reads 0.25 high: the whole error grows only about 1.35x and
  // the blind errors' own noise hides whether ignoring b explains it: the
  // alarm is read as a process change (a retrain), as without attribution.
  const Outcome o = RunScenario(300, [](Process& p, int) { return p.Next(Rotation(-0.5), {0.0, 0.25}); });
  EXPECT_EQ(o.sensor_alarm, -1);
  ASSERT_TRUE(o.last.last_alarm.has_value()) << "the change test did alarm";
  EXPECT_EQ(o.last.last_alarm->kind, DriftAttribution::Kind::kProcessChange);
}

TEST(DriftAttribution, JudgeNeedsWarmReferences) {
  DriftAttribution a(2);
  const double own[2] = {1, 1}, blind[2] = {1, 1};
  for (int i = 0; i < DriftAttribution::kMinReference - 1; ++i) a.Add(1, own, blind, true);
  const double big_own[2] = {9, 9};
  for (int i = 0; i < DriftAttribution::kRecent; ++i) a.Add(9, big_own, blind, false);
  EXPECT_EQ(a.Judge().kind, DriftAttribution::Kind::kUnknown) << "199 reference samples";
  a.Add(1, own, blind, true);
  for (int i = 0; i < DriftAttribution::kRecent; ++i) a.Add(9, big_own, blind, false);
  const DriftAttribution::Verdict v = a.Judge();
  EXPECT_EQ(v.kind, DriftAttribution::Kind::kProcessChange) << "no blind error grew less: not one sensor";
  EXPECT_NEAR(v.full_ratio, 3.0, 1e-12);
  EXPECT_EQ(v.grew, (std::vector<int>{0, 1}));
}

TEST(DriftAttribution, OneExplainedChannelIsASensorTwoAreNot) {
  const double own[3] = {1, 1, 1};
  const auto verdict = [&](double full_after, std::vector<double> blind_before, std::vector<double> blind_after) {
    DriftAttribution a(3);
    for (int i = 0; i < DriftAttribution::kMinReference; ++i) a.Add(1, own, blind_before.data(), true);
    for (int i = 0; i < DriftAttribution::kRecent; ++i) a.Add(full_after, own, blind_after.data(), false);
    return a.Judge();
  };
  const std::vector<double> ones{1.0, 1.0, 1.0};
  // The whole error's mean square rises 1 -> 16 (R = 15, RMS 4x): a blind
  // rise <= 5 explains it, >= 7.5 does not.
  DriftAttribution::Verdict v = verdict(16, ones, {1.0, 16.0, 16.0});
  EXPECT_EQ(v.kind, DriftAttribution::Kind::kSensor);
  EXPECT_EQ(v.channel, 0);
  EXPECT_EQ(verdict(16, ones, {1.0, 1.0, 16.0}).kind, DriftAttribution::Kind::kProcessChange) << "two explain it";
  EXPECT_EQ(verdict(16, ones, {1.0, 7.0, 16.0}).kind, DriftAttribution::Kind::kProcessChange)
      << "one partly explains it";
  const double nan = std::nan("");
  EXPECT_EQ(verdict(16, {nan, 1.0, 1.0}, {nan, 16.0, 16.0}).kind, DriftAttribution::Kind::kProcessChange)
      << "a channel whose blind estimate never ran cannot be ruled in or out";
  // A blind error far noisier than the rise (mean square 100 against R =
  // 15: its sampling noise over 100 samples is ~14) is not judged: channel
  // 0 is not named, and no other explains the rise.
  EXPECT_EQ(verdict(16, {100.0, 1.0, 1.0}, {100.0, 16.0, 16.0}).kind, DriftAttribution::Kind::kProcessChange);
  // The sensor pattern below a doubling (RMS 1.73x), and a rise too small
  // to read (RMS 1.18x): pending.
  v = verdict(3, ones, {1.0, 3.0, 3.0});
  EXPECT_EQ(v.kind, DriftAttribution::Kind::kPending);
  EXPECT_EQ(v.channel, 0);
  EXPECT_EQ(verdict(1.4, ones, {1.0, 1.4, 1.4}).kind, DriftAttribution::Kind::kPending);
}

}  // namespace
}  // namespace lyapcast
