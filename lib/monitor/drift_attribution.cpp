#include "monitor/drift_attribution.h"

#include <algorithm>
#include <cmath>

namespace lyapcast {

void DriftAttribution::Figure::Add(double sq, bool in_control) {
  if (!std::isfinite(sq)) return;
  recent[recent_next] = sq;
  recent_next = (recent_next + 1) % kRecent;
  if (recent_n < kRecent) ++recent_n;
  if (!in_control) return;
  ++reference_n;
  // Cumulative mean first, so the first values do not dominate; then an
  // EWMA that follows slow, harmless changes of the error level.
  const double weight = reference_n <= kReferenceSpan ? 1.0 / static_cast<double>(reference_n)
                                                      : 2.0 / (kReferenceSpan + 1);
  reference += weight * (sq - reference);
}

double DriftAttribution::Figure::RecentMean() const {
  double sum = 0;  // summed afresh: a running sum would accumulate rounding
  for (int i = 0; i < recent_n; ++i) sum += recent[i];
  return recent_n > 0 ? sum / recent_n : 0.0;
}

std::optional<double> DriftAttribution::Figure::Ratio(int min_reference) const {
  if (reference_n < min_reference || recent_n < kRecent || !(reference > 0)) return std::nullopt;
  return std::sqrt(RecentMean() / reference);
}

DriftAttribution::DriftAttribution(int channels)
    : channels_(channels), own_(static_cast<std::size_t>(channels)), blind_(static_cast<std::size_t>(channels)) {}

void DriftAttribution::Reset() {
  full_ = Figure{};
  for (Figure& f : own_) f = Figure{};
  for (Figure& f : blind_) f = Figure{};
}

void DriftAttribution::Add(double full_sq, const double* own_sq, const double* blind_sq, bool in_control) {
  full_.Add(full_sq, in_control);
  for (int c = 0; c < channels_; ++c) {
    own_[static_cast<std::size_t>(c)].Add(own_sq[c], in_control);
    blind_[static_cast<std::size_t>(c)].Add(blind_sq[c], in_control);
  }
}

DriftAttribution::Verdict DriftAttribution::Judge() const {
  Verdict v;
  const std::optional<double> full = full_.Ratio(kMinReference);
  if (!full) return v;
  v.full_ratio = *full;
  // The channels whose own error grew most: at least kMinGrowth, and at
  // least half the largest growth (in log).
  double most = 0;
  std::vector<double> own_growth(static_cast<std::size_t>(channels_), 0.0);
  for (int c = 0; c < channels_; ++c) {
    const std::optional<double> own = own_[static_cast<std::size_t>(c)].Ratio(kMinReference);
    own_growth[static_cast<std::size_t>(c)] = own ? std::log(*own) : 0.0;
    most = std::max(most, own_growth[static_cast<std::size_t>(c)]);
  }
  for (int c = 0; c < channels_; ++c) {
    const double g = own_growth[static_cast<std::size_t>(c)];
    if (g >= kMinGrowth && g >= 0.5 * most) v.grew.push_back(c);
  }
  const double growth = std::log(*full);
  if (growth < kMinGrowth) {
    v.kind = Kind::kPending;
    return v;
  }
  v.kind = Kind::kProcessChange;
  if (channels_ < 2) return v;
  // Compared as increases of the mean square over the reference, not as
  // ratios: a blind estimate carries noise of its own (a weakly contracting
  // channel's estimate wanders), which would hide the same increase in a
  // ratio. A blind error whose own sampling noise over kRecent samples is
  // too large to see a quarter of the whole error's increase says nothing
  // either way, and neither does its channel.
  const double rise = full_.RecentMean() - full_.reference;
  const double noise_limit = 0.25 * rise / std::sqrt(2.0 / kRecent);
  int explained = -1, count = 0, grown = 0;
  for (int c = 0; c < channels_; ++c) {
    const Figure& b = blind_[static_cast<std::size_t>(c)];
    if (!b.Ratio(kMinReference)) return v;  // a channel whose blind estimate never ran: cannot rule it in or out
    if (b.reference > noise_limit) continue;
    const double blind_rise = b.RecentMean() - b.reference;
    if (blind_rise <= kExplained * rise) {
      explained = c;
      ++count;
    } else if (blind_rise >= kUnexplained * rise) {
      ++grown;
    } else {
      return v;  // partly explained: not one sensor
    }
  }
  if (count == 1 && grown >= 1) {
    v.kind = growth >= kSensorGrowth ? Kind::kSensor : Kind::kPending;
    v.channel = explained;
  }
  return v;
}

std::vector<DriftAttribution::ChannelFigures> DriftAttribution::Figures() const {
  std::vector<ChannelFigures> out(static_cast<std::size_t>(channels_));
  for (int c = 0; c < channels_; ++c) {
    out[static_cast<std::size_t>(c)].error_ratio = own_[static_cast<std::size_t>(c)].Ratio(kMinReference);
    out[static_cast<std::size_t>(c)].blind_ratio = blind_[static_cast<std::size_t>(c)].Ratio(kMinReference);
  }
  return out;
}

}  // namespace lyapcast
