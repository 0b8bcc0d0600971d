// Slow (label `slow`) Lorenz spectra: 10x the unit tests' run length and two
// RK4 substeps per map step, so the estimates sit well inside the +-2 % of
// docs/references.md "Lyapunov exponents" and the integrator is not what limits them.
// References: Sprott, "Common chaotic systems" table (2004) for s = 10,
// r = 28, b = 8/3 (0.9056, 0, -14.5723); Wolf, Swift, Swinney & Vastano,
// Physica D 16 (1985) 285 for s = 16, r = 45.92, b = 4 (1.50, 0, -22.46).
#include "chaos/lyapunov.h"

#include <gtest/gtest.h>

#include <cstdio>

#include "support/feeds.h"

namespace lyapcast {
namespace {

SpectrumEstimate LorenzSpectrum(double s, double r, double b) {
  const Dynamics d = testing::MustCompile(testing::MakeFeed(
      "lorenz", {"x", "y", "z"}, {{"x", "s*(y - x)"}, {"y", "x*(r - z) - y"}, {"z", "x*y - b*z"}},
      {{"s", s}, {"r", r}, {"b", b}}));
  Eigen::VectorXd x0(3);
  x0 << 1.0, 1.0, 20.0;
  SpectrumOptions o;
  o.transient_steps = 10000;  // 100 time units
  o.steps = 1000000;          // 10000 time units
  Result<SpectrumEstimate> e = LyapunovSpectrum(FlowMapStep(d, 0.01, 2), x0, o);
  EXPECT_TRUE(e.ok()) << e.status().ToString();
  if (!e.ok()) return {};
  std::printf("lorenz s=%g r=%g b=%g (10000 tu): %.5f %.5f %.5f sum %.5f convergence %.5f\n", s, r, b,
              e->exponents[0], e->exponents[1], e->exponents[2], e->exponents.sum(), e->convergence);
  return std::move(e).value();
}

TEST(LorenzSpectrumSlowTest, Sprott) {
  const SpectrumEstimate e = LorenzSpectrum(10.0, 28.0, 8.0 / 3.0);
  ASSERT_EQ(e.exponents.size(), 3);
  EXPECT_NEAR(e.exponents[0], 0.9056, 0.02 * 0.9056);
  EXPECT_NEAR(e.exponents[1], 0.0, 0.01);
  EXPECT_NEAR(e.exponents[2], -14.5723, 0.02 * 14.5723);
  EXPECT_NEAR(e.exponents.sum(), -(10 + 1 + 8.0 / 3.0), 0.005 * (10 + 1 + 8.0 / 3.0));
}

TEST(LorenzSpectrumSlowTest, Wolf) {
  const SpectrumEstimate e = LorenzSpectrum(16.0, 45.92, 4.0);
  ASSERT_EQ(e.exponents.size(), 3);
  EXPECT_NEAR(e.exponents[0], 1.50, 0.02 * 1.50);
  EXPECT_NEAR(e.exponents[1], 0.0, 0.01);
  EXPECT_NEAR(e.exponents[2], -22.46, 0.02 * 22.46);
  EXPECT_NEAR(e.exponents.sum(), -21.0, 0.005 * 21.0);
}

}  // namespace
}  // namespace lyapcast
