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
// So at an alarm, with G the growth of the full error and g_c that of c's
// blind error (log of the recent RMS over the reference RMS):
//   - sensor c when exactly one channel has g_c <= kExplained * G and every
//     other channel's blind error grew, g_d >= kUnexplained * G (at least
//     one). A blind estimate that does not settle is left out of the
//     judgment: its reference RMS is over kInformative times the full
//     error's (a learned map need not pull a weakly contracting channel
//     back; Lorenz-63's y, whose own damping is -1 against sigma = 10 for
//     x, is one), and so is its channel: it can be neither named nor ruled
//     out, and with too few settled estimates every alarm is a process change;
//     When the whole error grew less than twofold (G < kSensorGrowth) the
//     verdict is PENDING instead: a model still catching up with a real
//     change can show the same pattern at a small growth (seen on
//     Lorenz-63 a few seconds after a change of r). The caller neither
//     retrains nor reports; a lasting fault alarms again, larger;
//   - process change otherwise;
//   - pending also when G is below kMinGrowth: the change test saw a rise
//     that the recent window does not show clearly enough to read (the
//     next alarm of a lasting change will);
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
  static constexpr int kRecent = 30;            // samples in the recent mean square
  static constexpr int kReferenceSpan = 1000;   // samples in the reference (EWMA span once full)
  static constexpr int kMinReference = 200;     // reference samples before any verdict
  static constexpr double kExplained = 1.0 / 3;  // blind growth at most this share of the full growth
  static constexpr double kUnexplained = 0.5;   // every other blind growth at least this share
  static constexpr double kMinGrowth = 0.2;     // log growth of the full error needed to judge (~1.22x)
  static constexpr double kInformative = 5.0;   // blind reference RMS above this x the full one: not settled
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
    double recent[kRecent] = {};
    int recent_n = 0, recent_next = 0;

    void Add(double sq, bool in_control);
    std::optional<double> Ratio(int min_reference) const;  // recent / reference RMS
  };

  int channels_;
  Figure full_;
  std::vector<Figure> own_, blind_;
};

}  // namespace lyapcast
