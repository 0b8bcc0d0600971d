#include "core/sample.h"

namespace lyapcast {

// Missing channels compare equal whatever their placeholder values.
bool operator==(const Sample& a, const Sample& b) {
  if (a.t != b.t || a.missing_mask != b.missing_mask || a.values.size() != b.values.size()) return false;
  for (size_t c = 0; c < a.values.size(); ++c) {
    if (!a.missing(static_cast<int>(c)) && a.values[c] != b.values[c]) return false;
  }
  return true;
}

}  // namespace lyapcast
