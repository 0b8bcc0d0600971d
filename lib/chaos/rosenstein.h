// Largest Lyapunov exponent from a time series by the method of Rosenstein,
// Collins & De Luca, Physica D 65 (1993) 117 (docs/references.md "Lyapunov exponents": +-25 %).
//
// 1. Delay embedding Y_i = (x_i, x_{i+lag}, ..., x_{i+(m-1) lag}). The lag
//    is the first shift at which the autocorrelation drops below 1 - 1/e
//    (the paper's choice), capped at max_lag.
// 2. Theiler window w (neighbours must be at least w samples apart in time,
//    so a neighbour is not just the same stretch of trajectory) = one mean
//    period, estimated as the paper does: the reciprocal of the mean
//    frequency of the power spectrum (radix-2 FFT of the mean-removed,
//    zero-padded series).
// 3. Nearest neighbour (Euclidean, brute force) of every reference point
//    outside the window; d(k) = mean over pairs of ln |Y_{j+k} - Y_{nn(j)+k}|
//    for k = 0..K.
// 4. Slope of d(k) over the linear region, chosen automatically: among
//    windows [b, e) with b >= fit_skip, e <= the saturation step (the first k
//    where d(k) has covered saturation_fraction of its total rise) and
//    e - b >= the minimum length, the window with the largest R^2 of the
//    least-squares line. lambda = slope / dt.
// Cost: O(R * N * m) for R reference points and N embedded points: at most
// max_references reference points (evenly spaced) are used, neighbours are
// searched among all points; series longer than max_samples keep the most
// recent max_samples values.
//
// The estimate depends strongly on the fit region: report fit_begin,
// fit_end and r_squared with the value.
// Thread safety: reentrant pure functions; nothing throws.
#pragma once

#include "core/eigen.h"  // first, instead of <Eigen/Core>: see there

#include <vector>

#include "core/status.h"

namespace lyapcast {

struct RosensteinOptions {
  int dimension = 3;       // embedding dimension m (>= 1)
  int lag = 0;             // 0: from the autocorrelation (see above)
  int max_lag = 100;       // cap on the automatic lag (>= 1)
  int theiler = 0;         // 0: one mean period from the power spectrum
  int max_steps = 0;       // K (0 or >= 5); 0: clamp(10 * theiler, 20, N_embedded / 4)
  int fit_skip = 1;        // the fit starts at k >= this ("after the first few steps")
  int min_fit_length = 0;  // in steps k; 0: max(5, (saturation - fit_skip) / 3)
  double saturation_fraction = 0.8;  // in (0, 1]
  int max_references = 3000;
  int max_samples = 100000;
};

struct RosensteinEstimate {
  double lambda = 0;  // largest exponent, per unit of the sample spacing dt's unit
  int lag = 0, dimension = 0, theiler = 0;
  int fit_begin = 0, fit_end = 0;  // fitted k in [fit_begin, fit_end)
  double r_squared = 0;
  double slope_per_step = 0;       // slope of d(k) per sample
  std::vector<double> divergence;  // d(k) = <ln distance>, k = 0..K
};

// From a scalar series sampled every dt (> 0, finite).
// Errors (kInvalidArgument): dt not positive/finite, non-finite values, a
// constant series, options out of range, or a series too short: fewer than
// 100 samples, or fewer than max(50, 2 (K + theiler)) embedded points left
// once the last K are reserved for the divergence (the message says roughly
// how many samples are needed).
[[nodiscard]] Result<RosensteinEstimate> RosensteinLargest(const std::vector<double>& series, double dt,
                                                           const RosensteinOptions& options = {});

// From a vector series: `samples` is channels x N (columns are samples, as
// in lib/learn); uses row `channel`. kInvalidArgument for a bad channel.
[[nodiscard]] Result<RosensteinEstimate> RosensteinLargest(const Eigen::MatrixXd& samples, int channel, double dt,
                                                           const RosensteinOptions& options = {});

}  // namespace lyapcast
