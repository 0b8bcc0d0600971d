#include "learn/alignment.h"

#include <algorithm>
#include <chrono>
#include <vector>

namespace lyapcast {

FormedValue ValueAt(const ChannelPoint* a, const ChannelPoint* b, DataTime at, const AlignmentOptions& options,
                    Micros hold) {
  if (a != nullptr && a->t == at) return {Formed::kExact, a->value};
  if (b != nullptr && b->t == at) return {Formed::kExact, b->value};
  if (a != nullptr && b != nullptr && b->t - a->t <= options.max_span_or_default()) {
    const double w = static_cast<double>((at - a->t).count()) / static_cast<double>((b->t - a->t).count());
    return {Formed::kInterpolated, a->value + w * (b->value - a->value)};
  }
  const Micros tolerance = options.tolerance_or_default();
  const Micros da = a != nullptr ? at - a->t : Micros::max();
  const Micros db = b != nullptr ? b->t - at : Micros::max();
  if (da <= db && da <= tolerance) return {Formed::kNearest, a->value};
  if (db < da && db <= tolerance) return {Formed::kNearest, b->value};
  if (a != nullptr && hold > Micros{} && da <= hold) return {Formed::kCarried, a->value};
  return {};
}

std::optional<Micros> MedianSpacing(std::span<const Sample> sorted) {
  if (sorted.size() < 2) return std::nullopt;
  std::vector<Micros> gaps;
  gaps.reserve(sorted.size() - 1);
  for (std::size_t i = 1; i < sorted.size(); ++i) gaps.push_back(sorted[i].t - sorted[i - 1].t);
  const auto mid = gaps.begin() + static_cast<std::ptrdiff_t>(gaps.size() / 2);
  std::nth_element(gaps.begin(), mid, gaps.end());
  return *mid;
}

}  // namespace lyapcast
