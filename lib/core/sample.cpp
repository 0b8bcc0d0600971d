#include "core/sample.h"

namespace lyapcast {

// Missing channels compare equal whatever their placeholder values; a
// suspect channel's raw reading counts.
bool operator==(const Sample& a, const Sample& b) {
  if (a.t != b.t || a.missing_mask != b.missing_mask || a.suspect_mask != b.suspect_mask ||
      a.values.size() != b.values.size()) {
    return false;
  }
  for (size_t c = 0; c < a.values.size(); ++c) {
    const bool kept = !a.missing(static_cast<int>(c)) || a.suspect(static_cast<int>(c));
    if (kept && a.values[c] != b.values[c]) return false;
  }
  return true;
}

}  // namespace lyapcast
