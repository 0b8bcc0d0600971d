#include "monitor/drift_monitor.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <utility>

namespace lyapcast {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr double kAlpha = 2.0 / (DriftMonitor::kWindow + 1);  // the EWMA whose span is kWindow

ChangeTestOptions ChangeOptions(const DriftMonitorOptions& m) {
  ChangeTestOptions o;
  o.threshold = m.change_threshold;
  o.drift = m.change_drift;
  o.warmup = DriftMonitor::kWarmupBlocks;
  return o;
}



}  // namespace

DriftMonitor::DriftMonitor(const DriftMonitorOptions& options)
    : channels_(options.channels),
      step_(options.step),
      max_gap_(std::max(options.max_gap, 1)),
      keep_(options.reorder_window + (std::max(options.max_gap, 1) + 1) * options.step),
      alignment_{options.step, Micros{}, Micros{}, options.hold},
      change_options_(ChangeOptions(options)),
      history_(kHistory),
      last_seen_(static_cast<std::size_t>(std::max(options.channels, 0))),
      change_(change_options_),
      attribution_(std::max(options.channels, 0)),
      own_sq_(static_cast<std::size_t>(std::max(options.channels, 0)), kNaN),
      blind_sq_(static_cast<std::size_t>(std::max(options.channels, 0)), kNaN) {}

Status DriftMonitor::SetModel(std::shared_ptr<const ForecastModel> model, std::int64_t version,
                              double validation_error, DataTime trained_to, WallTime promoted_wall,
                              Handover handover) {
  if (model != nullptr && model->shape().channels != channels_) {
    return Status::Invalid(fmt::format("model version {} has {} channels, the feed {}", version,
                                       model->shape().channels, channels_));
  }
  model_ = std::move(model);
  scratch_ = model_ != nullptr ? model_->NewScratch() : nullptr;
  blind_scratch_ = model_ != nullptr ? model_->NewScratch() : nullptr;
  version_ = version;
  validation_error_ = validation_error;
  trained_to_ = trained_to;
  promoted_wall_ = promoted_wall;
  // Samples that arrived before this model were not its to score.
  scorable_from_ = newest_ ? std::max(*newest_, trained_to) : trained_to;
  unscored_ = Unscored::kNone;
  for (std::int64_t i = 0; i < size_; ++i) {
    slot(i).scored = true;
    // Blind estimates were the outgoing model's: restart them from the data.
    std::fill(slot(i).blind_age.begin(), slot(i).blind_age.end(), 0);
  }
  const bool carry = handover == Handover::kSuccessor && model_ != nullptr && alarms_ == 0;
  if (carry) {
    ResetScores();
  } else {
    Reset();
  }
  return Status::Ok();
}

void DriftMonitor::SetPaused(bool paused) {
  if (paused_ && !paused && newest_) scorable_from_ = std::max(scorable_from_.value_or(*newest_), *newest_);
  paused_ = paused;
}

void DriftMonitor::Reset() {
  ResetScores();
  change_.Reset();
  attribution_.Reset();
  block_sum_ = 0;
  block_count_ = 0;
}

void DriftMonitor::ResetScores() {
  scored_ = 0;
  last_error_ = 0;
  ewma_sq_ = 0;
  window_sq_.fill(0);
  drift_flag_ = false;
  flagged_at_.reset();
  alarms_ = 0;
}

std::int64_t DriftMonitor::Insert(const Sample& s) {
  // Position: after every sample older than s (usually the end).
  std::int64_t pos = size_;
  while (pos > 0 && slot(pos - 1).sample.t > s.t) --pos;
  if (pos > 0 && slot(pos - 1).sample.t == s.t) {
    // The same row from another source: fill the channels it lacks.
    Sample& row = slot(pos - 1).sample;
    for (int c = 0; c < channels_; ++c) {
      if (row.missing(c) && !s.missing(c)) {
        row.values[static_cast<std::size_t>(c)] = s.values[static_cast<std::size_t>(c)];
        row.missing_mask &= ~(std::uint64_t{1} << c);
      }
    }
    return pos - 1;
  }
  if (size_ == kHistory) {
    if (pos == 0) return -1;  // older than everything kept
    head_ = (head_ + 1) % kHistory;  // drop the oldest
    --size_;
    --pos;
  }
  ++size_;
  Slot& end = slot(size_ - 1);
  end.sample = s;  // copy-assigns into the slot's storage
  end.scored = false;
  end.blind.resize(static_cast<std::size_t>(channels_));
  end.blind_age.assign(static_cast<std::size_t>(channels_), 0);
  for (std::int64_t i = size_ - 1; i > pos; --i) std::swap(slot(i), slot(i - 1));
  return pos;
}

void DriftMonitor::Prune() {
  if (!newest_) return;
  while (size_ > 1 && slot(0).sample.t < *newest_ - keep_) {
    head_ = (head_ + 1) % kHistory;
    --size_;
  }
}

double DriftMonitor::Score(std::int64_t i, bool* multi) {
  const Sample& target = slot(i).sample;
  const HistoryView before{this, i};  // strictly older samples: the target never forms its own input
  state_.resize(static_cast<std::size_t>(channels_));
  const auto c = static_cast<Eigen::Index>(channels_);
  int k = 1;
  for (; k <= max_gap_; ++k) {
    const DataTime at = target.t - k * step_;
    std::uint64_t missing = StateAt(before, at, channels_, alignment_, state_.data());
    // A slow channel's last value may be older than the history: carry it
    // from the channel's own record of its newest observations.
    for (int c = 0; c < channels_ && missing != 0; ++c) {
      if (!((missing >> c) & 1U)) continue;
      const Micros hold = alignment_.hold_for(c);
      if (hold <= Micros{}) continue;
      for (const ChannelPoint& p : last_seen_[static_cast<std::size_t>(c)]) {
        if (p.t <= at && at - p.t <= hold && p.t > DataTime{}) {
          state_[static_cast<std::size_t>(c)] = p.value;
          missing &= ~(std::uint64_t{1} << c);
          break;
        }
      }
    }
    if (missing == 0) break;
  }
  if (k > max_gap_) {
    unscored_ = Unscored::kNoState;
    return kNaN;
  }
  *multi = k > 1;
  x_.resize(c);
  for (Eigen::Index j = 0; j < c; ++j) x_[j] = state_[static_cast<std::size_t>(j)];
  for (int step = 0; step < k; ++step) {
    model_->Step(x_, &y_, *scratch_);
    if (step + 1 < k) x_ = y_;
  }
  const Eigen::VectorXd& scale = model_->error_scale();
  double sum = 0;
  int present = 0;
  for (int j = 0; j < channels_; ++j) {
    own_sq_[static_cast<std::size_t>(j)] = kNaN;
    if (target.missing(j)) continue;
    const double z = (y_[j] - target.values[static_cast<std::size_t>(j)]) / scale[j];
    own_sq_[static_cast<std::size_t>(j)] = z * z;
    sum += z * z;
    ++present;
  }
  const double e = std::sqrt(sum / present);
  if (k == 1) {
    RunBlind(i, target.t - step_);
  } else {
    std::fill(blind_sq_.begin(), blind_sq_.end(), kNaN);
  }
  if (!std::isfinite(e)) unscored_ = Unscored::kNotFinite;
  return e;
}

void DriftMonitor::RunBlind(std::int64_t i, DataTime at) {
  std::fill(blind_sq_.begin(), blind_sq_.end(), kNaN);
  if (channels_ < 2) return;  // no other channel to judge a blind estimate by
  Slot& s = slot(i);
  // The chain's previous link: the sample nearest the state's time, within
  // the alignment tolerance (on a jittered grid the previous sample; on an
  // oversampled one the sample one step back).
  const Micros tol = alignment_.tolerance_or_default();
  const Slot* parent = nullptr;
  Micros best = tol;
  for (std::int64_t j = i - 1; j >= 0 && slot(j).sample.t >= at - tol; --j) {
    const Slot& p = slot(j);
    const Micros d = p.sample.t > at ? p.sample.t - at : at - p.sample.t;
    if (d <= best && p.blind_age.size() == static_cast<std::size_t>(channels_)) {
      best = d;
      parent = &p;
    }
  }
  const auto n = static_cast<Eigen::Index>(channels_);
  blind_x_.resize(n, n);
  for (Eigen::Index c = 0; c < n; ++c) {
    blind_x_.col(c) = x_;
    if (parent != nullptr && parent->blind_age[static_cast<std::size_t>(c)] > 0) {
      blind_x_(c, c) = parent->blind[static_cast<std::size_t>(c)];
    }
  }
  model_->StepBatch(blind_x_, &blind_y_, *blind_scratch_);
  const Eigen::VectorXd& scale = model_->error_scale();
  for (int c = 0; c < channels_; ++c) {
    const auto uc = static_cast<std::size_t>(c);
    const int age = parent != nullptr ? parent->blind_age[uc] : 0;
    if (age == 0 || !std::isfinite(blind_y_(c, c))) {
      // Start the chain from the measurement (settles within kSettle steps
      // when the other channels drive this one).
      const bool present = !s.sample.missing(c);
      s.blind[uc] = present ? s.sample.values[uc] : kNaN;
      s.blind_age[uc] = present ? 1 : 0;
      continue;
    }
    s.blind[uc] = blind_y_(c, c);
    s.blind_age[uc] = std::min(age + 1, 1 << 30);
    if (age < kSettle) continue;
    double sum = 0;
    int present = 0;
    for (int d = 0; d < channels_; ++d) {
      if (d == c || s.sample.missing(d)) continue;
      const double z = (blind_y_(d, c) - s.sample.values[static_cast<std::size_t>(d)]) / scale[d];
      sum += z * z;
      ++present;
    }
    if (present > 0) blind_sq_[uc] = sum / present;
  }
}

bool DriftMonitor::SensorFaultActive() const {
  return sensor_fault_ && newest_ && *newest_ - sensor_fault_->last <= kSensorHoldSteps * step_;
}

bool DriftMonitor::TryScore(std::int64_t i, Observation* out) {
  Slot& s = slot(i);
  if (s.scored || model_ == nullptr) return false;
  if (paused_) {
    s.scored = true;  // a paused stretch is never scored, not even later
    return false;
  }
  if (s.sample.t <= trained_to_) {
    unscored_ = Unscored::kTrainedOn;
    return false;
  }
  bool any_present = false;
  for (int k = 0; k < channels_ && !any_present; ++k) any_present = !s.sample.missing(k);
  if (!any_present) {
    unscored_ = Unscored::kNoChannel;
    return false;
  }
  bool multi = false;
  // A non-finite e (a value beyond float range) would poison the rolling
  // figures until the next model; such a sample is not scored.
  const double e = Score(i, &multi);
  if (!std::isfinite(e)) return false;
  s.scored = true;
  if (multi) ++scored_multi_;
  if (newest_ && s.sample.t < *newest_) ++scored_late_;
  unscored_ = Unscored::kNone;
  if (!last_scored_ || s.sample.t > *last_scored_) last_scored_ = s.sample.t;
  const bool alarm_before = out->alarm_raised;
  Record(e, s.sample.t, out);
  return out->alarm_raised && !alarm_before;
}

void DriftMonitor::Record(double e, DataTime t, Observation* out) {
  out->scored = true;
  out->error = e;
  last_error_ = e;
  const double e2 = e * e;
  ewma_sq_ = scored_ == 0 ? e2 : ewma_sq_ + kAlpha * (e2 - ewma_sq_);  // start at the first value, not 0
  window_sq_[static_cast<std::size_t>(scored_ % kWindow)] = e2;
  ++scored_;
  // The references learn what is normal only while it is: not while the
  // change test climbs towards an alarm, nor during a sensor fault.
  const bool sensor_fault = SensorFaultActive();
  const bool in_control =
      !sensor_fault && (change_.warming_up() || change_.statistic() < 0.5 * change_options_.threshold);
  attribution_.Add(e2, own_sq_.data(), blind_sq_.data(), in_control);
  block_sum_ += std::log(e);
  if (++block_count_ < kBlock) return;
  const double block_mean = block_sum_ / kBlock;
  block_sum_ = 0;
  block_count_ = 0;
  if (!change_.Add(block_mean)) return;
  change_.Restart();
  const DriftAttribution::Verdict verdict = attribution_.Judge();
  last_alarm_ = DriftSnapshot::AlarmReading{t, verdict.kind, verdict.channel, verdict.grew, verdict.full_ratio};
  if (verdict.kind == DriftAttribution::Kind::kPending) return;  // wait for the next alarm
  if (verdict.kind == DriftAttribution::Kind::kSensor) {
    out->sensor_alarm = verdict.channel;
    if (!sensor_fault || sensor_fault_->channel != verdict.channel) {
      sensor_fault_ = DriftSnapshot::SensorFault{verdict.channel, t, t, 0};
    }
    sensor_fault_->last = t;
    ++sensor_fault_->alarms;
    ++sensor_alarms_total_;
    return;
  }
  out->alarm_raised = true;
  if (!drift_flag_) flagged_at_ = t;
  drift_flag_ = true;
  ++alarms_;
  ++alarms_total_;
}

DriftMonitor::Observation DriftMonitor::Observe(const Sample& s, WallTime arrived_wall) {
  Observation out;
  last_arrival_ = arrived_wall;
  if (s.values.size() != static_cast<std::size_t>(channels_)) {  // not this feed's shape: data age only
    if (!newest_ || s.t > *newest_) newest_ = s.t;
    return out;
  }
  if (newest_ && s.t < *newest_ - keep_) return out;  // too late to matter: data age only
  const std::int64_t i = Insert(s);
  if (!newest_ || s.t > *newest_) newest_ = s.t;
  for (int c = 0; c < channels_; ++c) {
    if (s.missing(c)) continue;
    auto& seen = last_seen_[static_cast<std::size_t>(c)];  // [0] newest, [1] the one before
    const ChannelPoint p{s.t, s.values[static_cast<std::size_t>(c)]};
    if (p.t > seen[0].t) {
      seen[1] = seen[0];
      seen[0] = p;
    } else if (p.t > seen[1].t && p.t < seen[0].t) {
      seen[1] = p;
    }
  }
  if (i < 0) return out;
  // The sample itself, then newer ones it may have made scorable (it can be
  // the state before them), in time order.
  TryScore(i, &out);
  const DataTime reach = slot(i).sample.t + (max_gap_ + 1) * step_;
  for (std::int64_t j = i + 1; j < size_ && slot(j).sample.t <= reach; ++j) {
    Observation later;
    TryScore(j, &later);
    if (later.alarm_raised) out.alarm_raised = true;
    if (later.sensor_alarm >= 0) out.sensor_alarm = later.sensor_alarm;
  }
  Prune();
  return out;
}

std::string DriftMonitor::DescribeUnscored() const {
  switch (unscored_) {
    case Unscored::kNone: return "";
    case Unscored::kTrainedOn: return "the newest samples are inside the model's training data";
    case Unscored::kNoChannel: return "the newest samples have no channel present";
    case Unscored::kNotFinite: return "the model's prediction or the sample is not finite";
    case Unscored::kNoState: break;
  }
  // Why no earlier state: too sparse, or channels missing.
  if (size_ == 0) return "no sample kept";
  const DataTime newest = slot(size_ - 1).sample.t;
  const DataTime reach = newest - max_gap_ * step_ - alignment_.tolerance_or_default();
  std::vector<Micros> gaps;
  std::uint64_t missing_before = 0;
  int before = 0;
  for (std::int64_t i = 0; i < size_; ++i) {
    const Sample& s = slot(i).sample;
    if (i > 0) gaps.push_back(s.t - slot(i - 1).sample.t);
    if (s.t >= reach && s.t < newest) {
      ++before;
      missing_before |= s.missing_mask;
    }
  }
  if (before == 0) {
    if (!gaps.empty()) {
      std::nth_element(gaps.begin(), gaps.begin() + static_cast<std::ptrdiff_t>(gaps.size() / 2), gaps.end());
      const Micros median = gaps[gaps.size() / 2];
      if (median > max_gap_ * step_ + alignment_.tolerance_or_default()) {
        return fmt::format("samples are about {} apart, more than model.max_gap {} steps of {}",
                           FormatDuration(median), max_gap_, FormatDuration(step_));
      }
    }
    return fmt::format("no sample in the {} steps of {} before the newest one", max_gap_, FormatDuration(step_));
  }
  std::string channels;
  for (int c = 0; c < channels_; ++c) {
    if ((missing_before >> c) & 1U) channels += fmt::format("{}{}", channels.empty() ? "" : ", ", c);
  }
  if (!channels.empty()) {
    return fmt::format("no complete state in the {} steps before the newest sample: channel(s) {} missing",
                       max_gap_, channels);
  }
  return fmt::format("no state could be formed in the {} steps of {} before the newest sample", max_gap_,
                     FormatDuration(step_));
}

double DriftMonitor::RmseWindow() const {
  const std::int64_t n = std::min<std::int64_t>(scored_, kWindow);
  if (n == 0) return kNaN;
  double sum = 0;  // summed afresh: a running sum would accumulate rounding
  for (std::int64_t i = 0; i < n; ++i) sum += window_sq_[static_cast<std::size_t>(i)];
  return std::sqrt(sum / static_cast<double>(n));
}

double DriftMonitor::e0() const {
  if (model_ == nullptr) return kNaN;
  return scored_ >= kMinScored ? RmseWindow() : validation_error_;
}

DriftSnapshot DriftMonitor::Snapshot(WallTime wall_now) const {
  DriftSnapshot d;
  if (model_ != nullptr) {
    d.model_version = version_;
    if (std::isfinite(validation_error_)) d.validation_error = validation_error_;
    d.model_age_s = Seconds(wall_now - promoted_wall_);
    if (newest_) d.since_training_s = Seconds(*newest_ - trained_to_);
  }
  d.scored = scored_;
  if (scored_ > 0) {
    d.last_error = last_error_;
    d.rmse_ewma = std::sqrt(ewma_sq_);
    d.rmse_window = RmseWindow();
    if (scored_ >= kMinScored && d.validation_error && *d.validation_error > 0) {
      d.drift_ratio = *d.rmse_window / *d.validation_error;
    }
  }
  d.change_statistic = change_.statistic();
  d.warming_up = change_.warming_up();
  d.drift_flag = drift_flag_;
  d.flagged_at = flagged_at_;
  d.alarms = alarms_;
  d.alarms_total = alarms_total_;
  d.paused = paused_;
  d.newest_data_time = newest_;
  d.scored_late = scored_late_;
  d.scored_multi = scored_multi_;
  d.channels = attribution_.Figures();
  d.last_alarm = last_alarm_;
  if (SensorFaultActive()) d.sensor_fault = sensor_fault_;
  d.sensor_alarms_total = sensor_alarms_total_;
  if (model_ != nullptr && !paused_ && newest_) {
    DataTime from = scorable_from_.value_or(trained_to_);
    if (last_scored_) from = std::max(from, *last_scored_);
    d.unscored_s = std::max(0.0, Seconds(*newest_ - from));
    d.unscored_cause = DescribeUnscored();
  }
  d.last_arrival_wall = last_arrival_;
  if (last_arrival_) d.data_age_s = Seconds(wall_now - *last_arrival_);
  return d;
}

}  // namespace lyapcast
