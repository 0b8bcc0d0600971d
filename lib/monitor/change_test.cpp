#include "monitor/change_test.h"

#include <algorithm>
#include <cassert>
#include <cmath>
#include <limits>

namespace lyapcast {

double SiegmundArl(double threshold, double drift, double mu) {
  const double d = mu - drift;
  const double h = threshold + 1.166;
  if (std::abs(d) < 1e-9) return h * h;  // the limit D -> 0
  return (std::exp(-2 * d * h) + 2 * d * h - 1) / (2 * d * d);
}

ChangeTest::ChangeTest(ChangeTestOptions options) : options_(options), warmup_(std::max(options.warmup, 2)) {
  assert(std::isfinite(options.threshold) && options.threshold > 0);
  assert(std::isfinite(options.drift) && options.drift >= 0);
}

double ChangeTest::stddev() const {
  if (count_ < 2) return 0;
  const double n = static_cast<double>(std::min(count_, warmup_));
  const double s = std::sqrt(m2_ / (n - 1));
  // Floor: a constant warm-up series would otherwise divide by zero.
  return std::max({s, 1e-9 * std::abs(mean_), std::numeric_limits<double>::min()});
}

bool ChangeTest::Add(double x) {
  if (!std::isfinite(x)) {
    ++ignored_;
    return false;
  }
  ++count_;
  if (count_ <= warmup_) {  // Welford: stable in one pass, no stored values
    const double delta = x - mean_;
    mean_ += delta / static_cast<double>(count_);
    m2_ += delta * (x - mean_);
    return false;
  }
  if (count_ == warmup_ + 1) scale_ = stddev();  // the estimate is final now
  if (alarm_) return false;  // decided; frozen until Restart/Reset
  const double z = (x - mean_) / scale_;
  statistic_ = std::max(0.0, statistic_ + z - options_.drift);
  // With a floored std, z may be +inf: S = inf alarms; it can never be NaN
  // because S >= 0 is finite before this step and -inf gives max(0, -inf).
  if (statistic_ > options_.threshold) alarm_ = true;
  return alarm_;
}

void ChangeTest::Reset() {
  count_ = 0;
  ignored_ = 0;
  mean_ = 0;
  m2_ = 0;
  Restart();
}

void ChangeTest::Restart() {
  statistic_ = 0;
  alarm_ = false;
}

}  // namespace lyapcast
