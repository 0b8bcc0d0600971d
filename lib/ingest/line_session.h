// LineSession: one ingest conversation without its transport (README
// "Ingest protocol"). A transport (the TCP server, later an MQTT client)
// feeds it bytes and sends the reply text it produces; the session owns
// everything in between:
//
//   framing      lines end at '\n'; a '\r' before it is dropped; a line longer
//                than max_line is answered line-too-long once and the rest of
//                it is skipped (the session stays usable); at end of input or
//                of a message an unterminated last line still counts.
//   auth         with a token set, the first line must be `auth <token>`
//                (constant-time compare); a wrong or missing token is answered
//                bad-auth and the session takes no more input.
//   parsing      LineParser; rejected lines are answered at once.
//   commits      the samples of each input call go to the SampleSink as one
//                batch; their replies wait for the outcomes.
//   replies      exactly one per line, in input order, whatever order the
//                outcomes arrive in: `ok <n>` (n counts accepted samples of
//                this session), `ok auth`, or `error <line> <code> <text>`
//                (line counts every line of this session from 1).
//   backpressure WantsInput() turns false while more than max_outstanding
//                samples await their outcome or more than max_pending_output
//                reply bytes are not yet sent; the transport stops reading.
//   counters     IngestCounters (lines, accepted, rejected by reason).
//
// Threads: a LineSession is not thread-safe. Every call on it (including
// Complete(), which the sink's completions must post back) happens on one
// thread or strand at a time, the session's thread below. It starts no
// threads and never blocks. Callbacks it makes (SampleSink::Submit, the
// EndMessage callback) run on the session's thread, inside one of its calls.
#pragma once

#include <cstddef>
#include <cstdint>
#include <deque>
#include <functional>
#include <optional>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

#include "config/config.h"
#include "core/reject_reason.h"
#include "core/sample.h"
#include "core/write_outcome.h"
#include "ingest/ingest_counters.h"
#include "ingest/line_parser.h"

namespace lyapcast {

struct LineSessionOptions {
  // Bytes, without the line ending, and the parser's future-time allowance;
  // the defaults are the config's limits (config/config.h).
  std::size_t max_line = LimitsConfig{}.max_line;
  Micros max_future_skew = LimitsConfig{}.max_future_skew;
  std::optional<std::string> token;               // required `auth <token>` first line when set
  std::size_t max_outstanding = 16384;            // samples awaiting their outcome before input pauses
  std::size_t max_pending_output = 1 << 20;       // unsent reply bytes before input pauses
  // Wall time (µs since the epoch) for the future-time check, read once per
  // input call; empty means the system clock. Tests pass a fixed clock.
  std::function<WallTime()> wall_clock;
};

// Names one Submit() so its outcomes can be handed back with Complete().
// Opaque to sinks: keep it and return it unchanged.
class SubmissionTicket {
 public:
  SubmissionTicket() = default;
  std::size_t samples() const { return samples_; }  // how many outcomes Complete() expects

 private:
  friend class LineSession;
  SubmissionTicket(std::uint64_t first_line, std::size_t samples) : first_line_(first_line), samples_(samples) {}
  std::uint64_t first_line_ = 0;  // the line of the batch's first sample
  std::size_t samples_ = 0;
};

// Where a session's samples are committed. The daemon implements it over the
// SampleWriter; tests implement it in memory.
class SampleSink {
 public:
  virtual ~SampleSink() = default;

  // Takes `samples` (non-empty, in line order) for a durable commit. Called
  // on the session's thread; must not call back into the session.
  // Returns true: the sink owes exactly one session.Complete(ticket,
  // outcomes) with one outcome per sample, in the order given, called on the
  // session's thread once the outcomes are final (accepted only after the
  // commit). Completions of different submissions may come in any order.
  // Returns false: the sink refuses new work (it is stopping); the session
  // answers each of these samples shutting-down and expects no Complete().
  virtual bool Submit(std::vector<FeedSample> samples, SubmissionTicket ticket) = 0;
};

class LineSession {
 public:
  // Why the session stopped taking input by itself (for the transport's log).
  enum class AuthFailure { kNone, kWrongToken, kMissing };

  // `config` (the feeds), `sink` and `counters` must outlive the session,
  // and every Complete() the sink owes must either reach the session or be
  // dropped: the owner keeps the session alive while outstanding() > 0, or
  // makes sure no completion arrives after it is destroyed.
  LineSession(const Config& config, SampleSink& sink, IngestCounters& counters, LineSessionOptions options);
  ~LineSession();
  LineSession(const LineSession&) = delete;
  LineSession& operator=(const LineSession&) = delete;

  // ---- input (all on the session's thread) ----

  // Frames `bytes` into lines, answers or parses each, and submits this
  // call's samples as one batch. A line may be split over any number of
  // calls. Works whatever WantsInput() says (that is advice for pausing
  // reads); ignored once AcceptsInput() is false.
  void Consume(std::string_view bytes);

  // Ends one message of a message-oriented transport (MQTT: one payload, one
  // or many lines): bytes after the last '\n' form a line of their own, and
  // the next Consume() starts a fresh line. Returns the number of the
  // message's last line (the lines received so far). `answered`, when given,
  // runs once with that number as soon as every line up to it has its reply
  // in the output (so each of its samples is committed or rejected) - before
  // EndMessage returns when that is already true, otherwise inside the
  // Complete() that makes it so. It never runs if the session is destroyed
  // first. It may call TakeReplies/RepliesSent and the getters, not the
  // input calls or Complete().
  std::uint64_t EndMessage(std::function<void(std::uint64_t last_line)> answered = {});

  // The peer finished sending: an unterminated last line still counts; no
  // more input. Lines received are still committed and answered.
  void EndInput();

  // No more input (shutdown, idle timeout): an unterminated partial line is
  // dropped unanswered (its sender had not finished it); lines received are
  // still committed and answered.
  void StopInput();

  // ---- commit outcomes ----

  // The outcomes of the submission `ticket` names, one per sample in order
  // (a shorter list counts the missing ones as storage-unavailable). Must be
  // called on the session's thread, once per accepted Submit().
  void Complete(SubmissionTicket ticket, std::vector<WriteOutcome> outcomes);

  // ---- output ----

  // Moves the reply text ready so far into `out` (cleared first; the buffers
  // are swapped so both keep their capacity): whole lines, one per input
  // line, in input order. The bytes count as pending output until
  // RepliesSent() says they left.
  void TakeReplies(std::string& out);
  // `bytes` of taken replies were sent (written to the socket, published):
  // they no longer count against max_pending_output.
  void RepliesSent(std::size_t bytes);

  // ---- state ----

  // AcceptsInput() and below both backpressure limits: the transport reads
  // only while this is true and re-checks it after each call.
  bool WantsInput() const;
  // No EndInput()/StopInput() yet and no auth failure.
  bool AcceptsInput() const { return input_open_; }
  // TakeReplies() would give text.
  bool HasReplies() const { return !out_.empty(); }
  // No more input, every line answered, every reply taken and sent: the
  // transport may close.
  bool Finished() const;
  std::size_t outstanding() const { return outstanding_; }  // samples submitted, outcome not yet known
  std::size_t pending_output() const { return out_.size() + unsent_taken_; }  // reply bytes not yet sent
  std::uint64_t lines_received() const { return line_no_; }
  std::uint64_t lines_answered() const { return answered_; }  // replies in the output (a prefix of the lines)
  AuthFailure auth_failure() const { return auth_failure_; }

 private:
  // One reply owed, in line order; the line is answered_ + 1 + its index.
  struct ReplySlot {
    enum class State : unsigned char { kWaiting, kOk, kText, kReject };
    State state = State::kWaiting;
    RejectReason reason = RejectReason::kStorageUnavailable;  // kReject
    std::string text;  // kText: the whole reply ("ok auth"); kReject: "<code> <text>"
  };
  struct AnsweredWaiter {
    std::uint64_t line;
    std::function<void(std::uint64_t)> done;
  };

  void Frame(std::string_view bytes);
  void HandleLine(std::string_view line);
  void HandleAuth(const std::string& token);
  void TooLong();
  void Reject(RejectReason reason, std::string_view message);
  void EndPartialLine();
  void SubmitBatch();
  void ApplyOutcomes(std::uint64_t first_line, std::size_t count, const std::vector<WriteOutcome>& outcomes);
  void Flush();

  const LineSessionOptions options_;
  SampleSink& sink_;
  IngestCounters& counters_;
  LineParser parser_;

  // framing
  std::string partial_;    // the unterminated line so far
  bool skipping_ = false;  // inside a too-long line, up to its '\n'
  bool input_open_ = true;
  bool authed_;
  AuthFailure auth_failure_ = AuthFailure::kNone;
  WallTime wall_now_{};    // read once per input call, on its first line
  std::uint64_t line_no_ = 0;
  std::uint64_t lines_unpublished_ = 0;  // added to counters_.lines once per input call

  // commits and replies
  std::vector<FeedSample> batch_;  // this call's samples
  std::uint64_t batch_first_line_ = 0;
  std::deque<ReplySlot> slots_;    // lines answered_ + 1 ... line_no_
  std::uint64_t answered_ = 0;
  std::uint64_t accepted_count_ = 0;
  std::size_t outstanding_ = 0;
  std::string out_;                // ready reply text not yet taken
  std::size_t unsent_taken_ = 0;   // taken but not yet reported sent
  std::deque<AnsweredWaiter> waiters_;  // EndMessage callbacks by line
};

}  // namespace lyapcast
