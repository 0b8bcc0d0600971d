// Portable standard normal numbers for the monitor tests.
//
// std::normal_distribution is implementation-defined (libstdc++ and libc++
// give different sequences for the same engine), so fixed-seed tests draw
// through Box-Muller on std::mt19937_64, whose output the standard fixes
// (log/sin/cos may differ in the last bit between C libraries; no test
// here sits that close to a boundary).
#pragma once

#include <cmath>
#include <cstdint>
#include <numbers>
#include <random>

namespace lyapcast::testing {

class NormalSource {
 public:
  explicit NormalSource(std::uint64_t seed) : rng_(seed) {}

  // One N(0, 1) value; Box-Muller yields two per pair of uniforms, the
  // second is kept for the next call.
  double operator()() {
    if (has_spare_) {
      has_spare_ = false;
      return spare_;
    }
    const double u1 = 1.0 - Uniform();  // (0, 1]: log(u1) finite
    const double u2 = Uniform();
    const double r = std::sqrt(-2.0 * std::log(u1));
    spare_ = r * std::sin(2.0 * std::numbers::pi * u2);
    has_spare_ = true;
    return r * std::cos(2.0 * std::numbers::pi * u2);
  }

 private:
  double Uniform() { return static_cast<double>(rng_() >> 11) * 0x1.0p-53; }  // [0, 1)

  std::mt19937_64 rng_;
  double spare_ = 0;
  bool has_spare_ = false;
};

}  // namespace lyapcast::testing
