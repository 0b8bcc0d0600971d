// ChangeTest: a one-sided sequential test for an INCREASE in the mean of a
// series (docs/design.md "Monitoring": the change test behind the drift flag).
//
// Page-Hinkley / CUSUM form (E.S. Page, Biometrika 41 (1954) 100), made
// scale-free: the first `warmup` finite observations after Reset() only
// estimate the in-control mean and standard deviation (Welford); after that
// each observation x gives z = (x - mean) / std and
//
//     S = max(0, S + z - drift),   alarm when S > threshold,
//
// the same as Page-Hinkley's m += z - drift, M = min(M, m), alarm when
// m - M > threshold (S = m - M). So `threshold` (h) and `drift` (k, per
// observation) are in units of the in-control standard deviation, whatever
// the units of x.
//
// Average run length (ARL), for independent Gaussian observations whose
// mean is mu standard deviations above the in-control mean, by Siegmund's
// approximation (D. Siegmund, Sequential Analysis: Tests and Confidence
// Intervals, Springer 1985, chapter II; see SiegmundArl below):
//
//     ARL(mu) ~ (exp(-2 D h') + 2 D h' - 1) / (2 D^2),  D = mu - k, h' = h + 1.166
//
// (1.166 = 2 * 0.583 corrects for the overshoot of the boundary; D = 0
// gives h'^2). It matches the exact Markov-chain values within about 1 %
// for k = 0.5 (h = 4: 338 vs 336; h = 5: 938 vs 930). In
// control (mu = 0) this is about exp(2 k h') / (2 k^2): for the defaults
// h = 15, k = 0.5, about 2e7 observations between false alarms. A step of
// 3 standard deviations adds 2.5 to S per observation and is flagged after
// about 6 observations; a step of 1 standard deviation after about 30.
// Two things shorten the in-control ARL in practice, which is why h is
// high: the mean and std are estimated from only `warmup` values (a mean
// estimate 0.2 sigma too low acts as a 0.2 sigma shift and cuts the ARL
// from 2e7 to about 9e4), and real scores are autocorrelated, not
// independent.
//
// The std estimate is floored at 1e-9 * |mean| (and at the smallest
// positive normal double), so a constant warm-up series gives a finite,
// very sensitive test instead of a division by zero: any later increase
// alarms.
//
// Once alarmed, the test stays alarmed and its statistic frozen until
// Restart() or Reset(). Non-finite observations are ignored (counted by
// ignored()). Not thread-safe; a plain value, copy freely.
#pragma once

namespace lyapcast {

struct ChangeTestOptions {
  double threshold = 15.0;  // h, in in-control standard deviations; requires finite and > 0
  double drift = 0.5;       // k, allowance per observation, in standard deviations; requires finite and >= 0
  int warmup = 200;         // observations that estimate mean and std; values below 2 count as 2
};

// Siegmund's approximation of the ARL above for a shift of `mu` in-control
// standard deviations (mu = 0: the in-control ARL). For tests and for
// explaining a configured threshold.
double SiegmundArl(double threshold, double drift, double mu);

class ChangeTest {
 public:
  explicit ChangeTest(ChangeTestOptions options = {});

  // Adds one observation. Returns true exactly on the observation that
  // raises the alarm; false during warm-up, while already alarmed, and for
  // non-finite x (ignored).
  bool Add(double x);

  bool alarm() const { return alarm_; }
  // S (= m - M above); 0 during warm-up and after Reset/Restart.
  double statistic() const { return statistic_; }
  bool warming_up() const { return count_ < warmup_; }
  // Finite observations since Reset(), warm-up included (Restart keeps it).
  long observations() const { return count_; }
  // Non-finite observations since Reset().
  long ignored() const { return ignored_; }
  // The in-control estimate (running during warm-up, then fixed), std floored as above.
  double mean() const { return mean_; }
  double stddev() const;
  const ChangeTestOptions& options() const { return options_; }

  // Forgets everything: warm-up starts again, alarm and statistic cleared.
  void Reset();
  // Clears the statistic and the alarm but keeps the in-control estimate
  // (and the counts), so the test can alarm again on the same scale.
  void Restart();

 private:
  ChangeTestOptions options_;
  long warmup_;
  long count_ = 0;
  long ignored_ = 0;
  double mean_ = 0;
  double m2_ = 0;     // Welford's sum of squared deviations
  double scale_ = 1;  // stddev(), fixed once warm-up ends
  double statistic_ = 0;
  bool alarm_ = false;
};

}  // namespace lyapcast
