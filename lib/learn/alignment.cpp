#include "learn/alignment.h"

#include <chrono>

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

}  // namespace lyapcast
