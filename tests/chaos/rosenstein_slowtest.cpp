// Slow (label `slow`) Rosenstein checks: the automatic lag, Theiler window
// and fit region should not hinge on one lucky series. Lorenz-63 x
// (reference 0.9056, Sprott 2004 table) over other lengths (100-200 time
// units), start points and embedding dimensions stays within the +-25 % of
// docs/references.md "Lyapunov exponents" (Rosenstein, Collins & De Luca, Physica D 65 (1993) 117).
#include "chaos/rosenstein.h"

#include <gtest/gtest.h>

#include <cstdio>

#include "chaos/chaos_test_util.h"

namespace lyapcast {
namespace {

using testing::LorenzSamples;
using testing::PrintEstimate;

TEST(RosensteinSlowTest, LorenzRobustToLengthStartAndDimension) {
  const double dt = 0.01;
  for (double duration : {100.0, 200.0}) {
    for (double z0 : {5.0, 30.0}) {
      for (int dim : {3, 5}) {
        RosensteinOptions o;
        o.dimension = dim;
        Result<RosensteinEstimate> r = RosensteinLargest(LorenzSamples(duration, dt, z0), 0, dt, o);
        ASSERT_TRUE(r.ok()) << r.status().ToString();
        SCOPED_TRACE(::testing::Message() << "duration " << duration << " z0 " << z0 << " dim " << dim);
        std::printf("duration %g z0 %g: ", duration, z0);
        PrintEstimate("lorenz x", *r, 0);
        EXPECT_NEAR(r->lambda, 0.9056, 0.25 * 0.9056);
      }
    }
  }
}

}  // namespace
}  // namespace lyapcast
