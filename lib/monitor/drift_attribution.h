// DriftAttribution: tells a failing sensor from a change of the process when
// the drift monitor's change test alarms (docs/design.md "Monitoring",
// "Which channel").
//
// Which channel's one-step error grew does not say which sensor failed: a
// process change may show in one channel's error only (a parameter that
// enters one equation), and a biased sensor shows in the errors of every
// channel whose dynamics read it. What separates the two is whether
// IGNORING one channel explains the growth. For each channel c the drift
// monitor runs a "blind" estimate of c: the model's own prediction of c,
// fed back step after step, with every other channel taken from the
// measurements (a reduced-order observer; when the other channels drive c,
// its estimate converges to the true c, as in Pecora and Carroll's
// synchronization of chaotic systems, Phys. Rev. Lett. 64 (1990) 821). The
// blind error of c is the one-step error of the OTHER channels' predictions
// made from that estimate.
//   - a fault on sensor c (bias, drift, stuck, spikes) corrupts every
//     prediction that reads c, except the ones made blind to c: the blind
//     error of c stays at its usual level while the full error grows;
//   - a change of the process corrupts the blind estimates too (they are
//     made with the old dynamics) and the predictions made from them: every
//     blind error grows with the full error.
// So at an alarm, with G the log growth of the full error's RMS (recent over
// reference), R its rise in mean square and R_c the rise of c's blind
// error's mean square:
//   - sensor c when exactly one channel has R_c <= kExplained * R and every
//     other judged channel's blind error rose, R_d >= kUnexplained * R (at
//     least one), and the full error at least doubled (G >= kSensorGrowth).
//     Rises, not ratios: a blind estimate carries noise of its own (a weakly
//     contracting channel's estimate wanders: Lorenz-63's y, damped at rate
//     1 against 10 for x, or a channel of a lightly damped oscillator),
//     which would hide the same rise in a ratio. A channel whose blind
//     error's own sampling noise over kRecent samples (reference x
//     sqrt(2 / kRecent)) exceeds a quarter of R is not judged: it can be
//     neither named nor ruled out;
//   - pending when that sensor pattern shows with less than a doubling
//     (a model still catching up with a real change can show it: seen on
//     Lorenz-63 a few seconds after a change of r), or when G is below
//     kMinGrowth (a rise the recent window does not show clearly): no
//     retrain, no report; a lasting change alarms again, larger;
//   - process change otherwise (a rise partly explained by one channel,
//     none or several explaining it, no judged channel);
//   - unknown while the references are warming up (treated like a process
//     change by the caller).
// Each verdict also names the channels whose own one-step error grew most
// (log growth >= kMinGrowth and >= half the largest).
// A channel that nothing else reads (a pure output) is unobservable this
// way: a change of its own dynamics looks like a sensor fault. A feed with
// one channel has no blind errors: every alarm is a process change.
//
// The reference of each figure is its mean square over the scored samples
// while the process was in control (the caller says when: not while the
// change test climbs or a sensor fault is active): a cumulative mean for the
// first kReferenceSpan samples, an EWMA of that span afterwards. "Recent" is
// the mean square of the last kRecent samples.
//
// Not thread-safe; the drift monitor owns one. No allocation per Add.
#pragma once

#include <cstdint>
#include <optional>
#include <vector>

namespace lyapcast {

class DriftAttribution {
 public:
  static constexpr int kRecent = 100;           // samples in the recent mean square
  static constexpr int kReferenceSpan = 1000;   // samples in the reference (EWMA span once full)
  static constexpr int kMinReference = 1000;    // reference samples before any verdict
  static constexpr double kExplained = 1.0 / 3;  // blind rise at most this share of the full rise
  static constexpr double kUnexplained = 0.5;   // every other judged blind rise at least this share
  static constexpr double kMinGrowth = 0.2;     // log growth of the full error needed to judge (~1.22x)
  static constexpr double kSensorGrowth = 0.6931471805599453;  // log 2: a sensor needs the error doubled

  enum class Kind { kUnknown, kProcessChange, kSensor, kPending };
  struct Verdict {
    Kind kind = Kind::kUnknown;
    int channel = -1;          // the suspect sensor (kSensor)
    std::vector<int> grew;     // channels whose own one-step error grew most (see above)
    double full_ratio = 0;     // recent / reference RMS of the full error (0 when unknown)
  };
  // Per-channel figures now (none until warm): recent / reference RMS.
  struct ChannelFigures {
    std::optional<double> error_ratio;  // the channel's own one-step error
    std::optional<double> blind_ratio;  // the other channels' error, made blind to this one
  };

  explicit DriftAttribution(int channels);

  // Forgets everything (a new, unrelated model).
  void Reset();

  // One scored sample: full_sq = e^2 of the drift monitor; own_sq[c] = the
  // squared normalized error of channel c (NaN when absent); blind_sq[c] =
  // the blind error of c squared (NaN when its estimate is not settled).
  // Each array has `channels` values. in_control: also update the references.
  void Add(double full_sq, const double* own_sq, const double* blind_sq, bool in_control);

  Verdict Judge() const;
  std::vector<ChannelFigures> Figures() const;

 private:
  struct Figure {
    double reference = 0;
    std::int64_t reference_n = 0;
    double recent[kRecent] = {};  // mean squares; recent_n of them hold values
    int recent_n = 0, recent_next = 0;

    void Add(double sq, bool in_control);
    std::optional<double> Ratio(int min_reference) const;  // recent / reference RMS
    double RecentMean() const;                              // mean square of the recent samples
  };

  int channels_;
  Figure full_;
  std::vector<Figure> own_, blind_;
};

}  // namespace lyapcast
