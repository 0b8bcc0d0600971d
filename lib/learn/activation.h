// Activation: the nonlinearity of an Mlp's hidden layers (learn/mlp.h).
//
// Owned by lib/learn; the config key feeds[].model.activation maps onto it
// (lib/config). Header-only, so lib/config can use the type without linking
// the numeric library.
#pragma once

namespace lyapcast {

enum class Activation { kTanh, kSilu };

// "tanh", "silu" (the config's spelling); "unknown" for a value outside the enum.
inline const char* ActivationName(Activation a) {
  switch (a) {
    case Activation::kTanh: return "tanh";
    case Activation::kSilu: return "silu";
  }
  return "unknown";
}

}  // namespace lyapcast
