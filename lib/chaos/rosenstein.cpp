// Rosenstein, Collins & De Luca (1993) largest exponent; see rosenstein.h.
#include "chaos/rosenstein.h"

#include <algorithm>
#include <cmath>
#include <complex>
#include <limits>
#include <numbers>
#include <utility>

#include <fmt/format.h>

namespace lyapcast {
namespace {

// In-place iterative radix-2 FFT; a.size() must be a power of two.
void Fft(std::vector<std::complex<double>>& a) {
  const size_t n = a.size();
  for (size_t i = 1, j = 0; i < n; ++i) {
    size_t bit = n >> 1;
    for (; j & bit; bit >>= 1) j ^= bit;
    j ^= bit;
    if (i < j) std::swap(a[i], a[j]);
  }
  for (size_t len = 2; len <= n; len <<= 1) {
    const double ang = -2.0 * std::numbers::pi / static_cast<double>(len);
    const std::complex<double> wl(std::cos(ang), std::sin(ang));
    for (size_t i = 0; i < n; i += len) {
      std::complex<double> w(1.0);
      for (size_t j = 0; j < len / 2; ++j) {
        const std::complex<double> u = a[i + j], v = a[i + j + len / 2] * w;
        a[i + j] = u + v;
        a[i + j + len / 2] = u - v;
        w *= wl;
      }
    }
  }
}

// First shift where the autocorrelation drops below 1 - 1/e, capped at max_lag.
int AutoLag(const std::vector<double>& c, double var_sum, int max_lag) {
  const double threshold = 1.0 - 1.0 / std::numbers::e;
  const size_t n = c.size();
  for (int tau = 1; tau <= max_lag && static_cast<size_t>(tau) < n; ++tau) {
    double s = 0;
    for (size_t i = 0; i + static_cast<size_t>(tau) < n; ++i) s += c[i] * c[i + static_cast<size_t>(tau)];
    if (s / var_sum < threshold) return tau;
  }
  return max_lag;
}

// One mean period in samples: 1 / (power-weighted mean frequency), the DC
// bin excluded (the series is mean-removed anyway).
int MeanPeriod(const std::vector<double>& c) {
  size_t p = 1;
  while (p < c.size()) p <<= 1;
  std::vector<std::complex<double>> a(p, 0.0);
  for (size_t i = 0; i < c.size(); ++i) a[i] = c[i];
  Fft(a);
  double sum_p = 0, sum_fp = 0;
  for (size_t f = 1; f <= p / 2; ++f) {
    const double power = std::norm(a[f]);
    sum_p += power;
    sum_fp += power * static_cast<double>(f) / static_cast<double>(p);
  }
  if (sum_p <= 0 || sum_fp <= 0) return 1;
  return std::max(1, static_cast<int>(std::lround(sum_p / sum_fp)));
}

struct Fit {
  int begin = 0, end = 0;
  double slope = 0, r2 = -1;
};

// Least-squares line of d over [b, e) for every admissible window; the best R^2.
Fit BestWindow(const std::vector<double>& d, int skip, int sat, int min_len) {
  const int n = static_cast<int>(d.size());
  std::vector<double> sy(n + 1, 0), syy(n + 1, 0), sxy(n + 1, 0);
  for (int k = 0; k < n; ++k) {
    sy[k + 1] = sy[k] + d[k];
    syy[k + 1] = syy[k] + d[k] * d[k];
    sxy[k + 1] = sxy[k] + k * d[k];
  }
  Fit best;
  for (int b = skip; b + min_len <= sat; ++b) {
    for (int e = b + min_len; e <= sat; ++e) {
      const double m = e - b;
      // Sums of x = k and x^2 over [b, e) in closed form.
      const double sx = (static_cast<double>(e) * (e - 1) - static_cast<double>(b) * (b - 1)) / 2.0;
      const double sxx = ((e - 1.0) * e * (2.0 * e - 1) - (b - 1.0) * b * (2.0 * b - 1)) / 6.0;
      const double Sy = sy[e] - sy[b], Syy = syy[e] - syy[b], Sxy = sxy[e] - sxy[b];
      const double vx = sxx - sx * sx / m, vy = Syy - Sy * Sy / m, cxy = Sxy - sx * Sy / m;
      if (vx <= 0 || vy <= 0) continue;
      const double slope = cxy / vx;
      const double r2 = cxy * cxy / (vx * vy);
      if (slope > 0 && r2 > best.r2) best = {b, e, slope, r2};
    }
  }
  return best;
}

}  // namespace

Result<RosensteinEstimate> RosensteinLargest(const std::vector<double>& series_in, double dt,
                                             const RosensteinOptions& o) {
  if (!std::isfinite(dt) || dt <= 0) {
    return Status::Invalid(fmt::format("rosenstein: sample spacing {} (need finite and > 0)", dt));
  }
  if (o.dimension < 1 || o.lag < 0 || o.max_lag < 1 || o.theiler < 0 || (o.max_steps != 0 && o.max_steps < 5) ||
      o.fit_skip < 0 || o.min_fit_length < 0 || o.max_references < 10 || o.max_samples < 100 ||
      !(o.saturation_fraction > 0) || o.saturation_fraction > 1) {
    return Status::Invalid("rosenstein: options out of range (dimension, max_lag >= 1; lag, theiler, fit_skip, "
                           "min_fit_length >= 0; max_steps 0 or >= 5; max_references >= 10; max_samples >= 100; "
                           "saturation_fraction in (0, 1])");
  }
  constexpr size_t kMinSamples = 100;
  if (series_in.size() < kMinSamples) {
    return Status::Invalid(fmt::format("rosenstein: series of {} samples is too short (need at least {})",
                                       series_in.size(), kMinSamples));
  }
  // Keep the most recent max_samples values.
  const size_t first = series_in.size() > static_cast<size_t>(o.max_samples) ? series_in.size() - o.max_samples : 0;
  std::vector<double> x(series_in.begin() + static_cast<std::ptrdiff_t>(first), series_in.end());
  const size_t n = x.size();
  double mean = 0;
  for (size_t i = 0; i < n; ++i) {
    if (!std::isfinite(x[i])) return Status::Invalid(fmt::format("rosenstein: sample {} is not finite", first + i));
    mean += x[i];
  }
  mean /= static_cast<double>(n);
  std::vector<double> c(n);
  double var_sum = 0;
  for (size_t i = 0; i < n; ++i) {
    c[i] = x[i] - mean;
    var_sum += c[i] * c[i];
  }
  if (!(var_sum > 0)) return Status::Invalid("rosenstein: the series is constant");

  RosensteinEstimate est;
  est.dimension = o.dimension;
  est.lag = o.lag > 0 ? o.lag : AutoLag(c, var_sum, o.max_lag);
  est.theiler = o.theiler > 0 ? o.theiler : MeanPeriod(c);
  const long span = static_cast<long>(o.dimension - 1) * est.lag;
  const long m_points = static_cast<long>(n) - span;  // embedded points
  // Ten mean periods cover the rise to saturation for flows (an error grows
  // by e^(lambda T) per period T); a quarter of the series keeps enough pairs.
  const long auto_k = std::clamp<long>(10L * est.theiler, 20L, std::max(20L, m_points / 4));
  const int K = o.max_steps > 0 ? o.max_steps : static_cast<int>(auto_k);
  const long usable = m_points - K;  // reference/neighbour candidates, so j + K stays inside
  const long need = std::max(50L, 2L * (K + est.theiler));
  if (usable < need) {
    return Status::Invalid(fmt::format(
        "rosenstein: series of {} samples is too short for lag {}, dimension {}, Theiler window {} and {} "
        "divergence steps (need roughly {} samples)",
        n, est.lag, o.dimension, est.theiler, K, span + K + need));
  }

  // Embedded points, row-major dimension-fastest for cache-friendly distances.
  const int m = o.dimension;
  std::vector<double> Y(static_cast<size_t>(m_points) * m);
  for (long i = 0; i < m_points; ++i) {
    for (int d = 0; d < m; ++d) Y[static_cast<size_t>(i) * m + d] = c[static_cast<size_t>(i + d * est.lag)];
  }
  auto dist2 = [&](long a, long b) {
    double s = 0;
    for (int d = 0; d < m; ++d) {
      const double t = Y[static_cast<size_t>(a) * m + d] - Y[static_cast<size_t>(b) * m + d];
      s += t * t;
    }
    return s;
  };

  const long refs = std::min<long>(usable, o.max_references);
  std::vector<double> sum(static_cast<size_t>(K) + 1, 0.0);
  std::vector<long> count(static_cast<size_t>(K) + 1, 0);
  for (long r = 0; r < refs; ++r) {
    const long j = refs == usable ? r : r * usable / refs;
    long nn = -1;
    double best = std::numeric_limits<double>::infinity();
    for (long i = 0; i < usable; ++i) {
      if (std::abs(i - j) <= est.theiler) continue;
      const double s = dist2(i, j);
      if (s > 0 && s < best) {  // s == 0: a duplicate point, no direction to diverge along
        best = s;
        nn = i;
      }
    }
    if (nn < 0) continue;
    for (int k = 0; k <= K; ++k) {
      const double s = dist2(j + k, nn + k);
      if (s > 0) {
        sum[static_cast<size_t>(k)] += 0.5 * std::log(s);
        ++count[static_cast<size_t>(k)];
      }
    }
  }
  est.divergence.resize(static_cast<size_t>(K) + 1);
  for (int k = 0; k <= K; ++k) {
    if (count[static_cast<size_t>(k)] == 0) return Status::Invalid("rosenstein: no neighbour pairs found");
    const size_t i = static_cast<size_t>(k);
    est.divergence[i] = sum[i] / static_cast<double>(count[i]);
  }

  // Saturation: the first k where d has covered saturation_fraction of its rise.
  const double d0 = est.divergence[0];
  const double dmax = *std::max_element(est.divergence.begin(), est.divergence.end());
  int sat = K + 1;
  for (int k = 0; k <= K; ++k) {
    if (est.divergence[static_cast<size_t>(k)] >= d0 + o.saturation_fraction * (dmax - d0)) {
      sat = k + 1;
      break;
    }
  }
  // K >= 5 (validated), so skip <= K - 2 leaves room for a 2-point line.
  const int skip = std::min(o.fit_skip, K - 2);
  const int min_len = std::clamp(o.min_fit_length > 0 ? o.min_fit_length : std::max(5, (sat - skip) / 3), 2,
                                 K + 1 - skip);
  const int end_max = std::clamp(sat, skip + min_len, K + 1);
  const Fit fit = BestWindow(est.divergence, skip, end_max, min_len);
  if (fit.r2 < 0) {
    return Status::Invalid("rosenstein: the mean log divergence has no rising region to fit (no positive "
                           "exponent, or too few divergence steps)");
  }
  est.fit_begin = fit.begin;
  est.fit_end = fit.end;
  est.r_squared = fit.r2;
  est.slope_per_step = fit.slope;
  est.lambda = fit.slope / dt;
  return est;
}

Result<RosensteinEstimate> RosensteinLargest(const Eigen::MatrixXd& samples, int channel, double dt,
                                             const RosensteinOptions& options) {
  if (channel < 0 || channel >= samples.rows()) {
    return Status::Invalid(fmt::format("rosenstein: channel {} out of range (the samples have {} channels)", channel,
                                       samples.rows()));
  }
  std::vector<double> series(static_cast<size_t>(samples.cols()));
  for (Eigen::Index i = 0; i < samples.cols(); ++i) series[static_cast<size_t>(i)] = samples(channel, i);
  return RosensteinLargest(series, dt, options);
}

}  // namespace lyapcast
