#include "ingest/line_session.h"

#include <fmt/format.h>

#include <cassert>
#include <charconv>
#include <cstring>

#include "core/secret.h"
#include "core/wall_clock.h"

namespace lyapcast {

namespace {

LineSessionOptions WithDefaults(LineSessionOptions o) {
  if (!o.wall_clock) o.wall_clock = [] { return WallNow(); };
  return o;
}

// The text after `error <line> <code> ` for outcomes the store decides.
std::string_view DescribeWriteReject(RejectReason reason) {
  switch (reason) {
    case RejectReason::kTooOld: return "sample is older than the feed's newest sample minus storage.retention";
    case RejectReason::kDuplicateTime: return "a channel of this feed is already stored at this time with a different value";
    case RejectReason::kStorageUnavailable:
      return "the store cannot commit right now (disk full or I/O error); resend later";
    case RejectReason::kShuttingDown: return "the daemon is shutting down; resend after it restarts";
    default: return "rejected by the store";
  }
}

void AppendNumber(std::string& out, std::uint64_t n) {
  char buf[24];
  const auto r = std::to_chars(buf, buf + sizeof buf, n);
  out.append(buf, r.ptr);
}

}  // namespace

LineSession::LineSession(const Config& config, SampleSink& sink, IngestCounters& counters, LineSessionOptions options)
    : options_(WithDefaults(std::move(options))),
      sink_(sink),
      counters_(counters),
      parser_(config, options_.max_future_skew),
      authed_(!options_.token.has_value()) {}

LineSession::~LineSession() = default;

// ---- input ----

void LineSession::Consume(std::string_view bytes) {
  if (!input_open_) return;
  Frame(bytes);
  if (!input_open_) partial_.clear();  // an auth failure ended the input mid-call
  SubmitBatch();
  Flush();
}

std::uint64_t LineSession::EndMessage(std::function<void(std::uint64_t)> answered) {
  if (input_open_) {
    EndPartialLine();
    SubmitBatch();
  }
  const std::uint64_t last = line_no_;
  if (answered) waiters_.push_back(AnsweredWaiter{last, std::move(answered)});
  Flush();
  return last;
}

void LineSession::EndInput() {
  if (!input_open_) return;
  EndPartialLine();
  input_open_ = false;
  SubmitBatch();
  Flush();
}

void LineSession::StopInput() {
  input_open_ = false;
  partial_.clear();
  skipping_ = false;
  Flush();
}

// Splits bytes into lines. A line longer than max_line is answered
// line-too-long once and its remaining bytes are skipped up to the newline;
// the check happens before copying, so a session never buffers more than
// max_line + 1 bytes of one line however large the input call.
void LineSession::Frame(std::string_view bytes) {
  const char* p = bytes.data();
  const char* const end = p + bytes.size();
  const std::size_t limit = options_.max_line + 1;  // +1: room for the '\r' of a CRLF ending
  while (p < end && input_open_) {
    const char* nl = static_cast<const char*>(std::memchr(p, '\n', static_cast<std::size_t>(end - p)));
    if (skipping_) {
      if (nl == nullptr) return;
      skipping_ = false;
      p = nl + 1;
      continue;
    }
    const std::size_t seg = static_cast<std::size_t>((nl == nullptr ? end : nl) - p);
    if (partial_.size() + seg > limit) {
      partial_.clear();
      TooLong();
      if (nl == nullptr) {
        skipping_ = true;
        return;
      }
    } else if (nl == nullptr) {
      partial_.append(p, seg);
      return;
    } else if (partial_.empty()) {
      HandleLine(std::string_view(p, seg));  // the common case: no copy
    } else {
      partial_.append(p, seg);
      HandleLine(partial_);
      partial_.clear();
    }
    p = nl + 1;
  }
}

// Bytes after the last '\n' as a line of their own (end of input or of a
// message). A too-long line being skipped was already answered.
void LineSession::EndPartialLine() {
  if (!partial_.empty() && !skipping_) HandleLine(partial_);
  partial_.clear();
  skipping_ = false;
}

void LineSession::HandleLine(std::string_view line) {
  if (!line.empty() && line.back() == '\r') line.remove_suffix(1);
  if (line.size() > options_.max_line) {
    TooLong();
    return;
  }
  ++line_no_;
  ++lines_unpublished_;
  if (wall_now_ == WallTime{}) wall_now_ = options_.wall_clock();
  ParsedLine parsed = parser_.Parse(line, wall_now_);
  if (parsed.kind == ParsedLine::Kind::kAuth) {
    HandleAuth(parsed.token);
    return;
  }
  if (!authed_) {
    auth_failure_ = AuthFailure::kMissing;
    input_open_ = false;
    Reject(RejectReason::kBadAuth, "this server requires 'auth <token>' as the first line");
    return;
  }
  if (parsed.kind == ParsedLine::Kind::kReject) {
    Reject(parsed.reason, parsed.message);
    return;
  }
  if (batch_.empty()) batch_first_line_ = line_no_;
  batch_.push_back(std::move(parsed.sample));
  slots_.emplace_back();  // waits for the outcome
}

// Only the first line may authenticate; once authenticated, repeating the
// right token is answered ok again (a client may resend its preamble).
void LineSession::HandleAuth(const std::string& token) {
  const std::optional<std::string>& expected = options_.token;
  if (!expected || ((line_no_ == 1 || authed_) && ConstantTimeEquals(token, *expected))) {
    authed_ = true;
    ReplySlot slot;
    slot.state = ReplySlot::State::kText;
    slot.text = "ok auth";
    slots_.push_back(std::move(slot));
    return;
  }
  auth_failure_ = AuthFailure::kWrongToken;
  input_open_ = false;
  Reject(RejectReason::kBadAuth, "wrong ingest token");
}

void LineSession::TooLong() {
  ++line_no_;
  ++lines_unpublished_;
  Reject(RejectReason::kLineTooLong,
         fmt::format("line exceeds {} bytes (limits.max_line); the rest of it is skipped", options_.max_line));
}

void LineSession::Reject(RejectReason reason, std::string_view message) {
  counters_.rejected[static_cast<int>(reason)].fetch_add(1, std::memory_order_relaxed);
  ReplySlot slot;
  slot.state = ReplySlot::State::kReject;
  slot.reason = reason;
  slot.text = message;
  slots_.push_back(std::move(slot));
}

// ---- commits ----

// Ends an input call: its samples go to the sink as one batch (group commit
// works on batches, so one per read keeps transactions large), the line
// count is published once, and the next call reads the clock again.
void LineSession::SubmitBatch() {
  wall_now_ = WallTime{};
  if (lines_unpublished_ != 0) {
    counters_.lines.fetch_add(lines_unpublished_, std::memory_order_relaxed);
    lines_unpublished_ = 0;
  }
  if (batch_.empty()) return;
  const std::size_t count = batch_.size();
  const std::uint64_t first = batch_first_line_;
  outstanding_ += count;
  std::vector<FeedSample> samples = std::move(batch_);
  batch_.clear();  // a moved-from vector is valid but unspecified
  if (!sink_.Submit(std::move(samples), SubmissionTicket(first, count))) {
    ApplyOutcomes(first, count, std::vector<WriteOutcome>(count, WriteOutcome{false, RejectReason::kShuttingDown}));
  }
}

void LineSession::Complete(SubmissionTicket ticket, std::vector<WriteOutcome> outcomes) {
  ApplyOutcomes(ticket.first_line_, ticket.samples_, outcomes);
  Flush();
}

// Fills the waiting slots of one batch. Its samples are the waiting slots
// from its first line on: batches are cut at input-call boundaries, so no
// other batch's sample lies between them, only replies that were ready at once.
void LineSession::ApplyOutcomes(std::uint64_t first_line, std::size_t count,
                                const std::vector<WriteOutcome>& outcomes) {
  // A ticket whose first slot is gone or filled was completed already (or
  // never issued): a sink bug, ignored rather than misattributed to other lines.
  const bool fresh = first_line > answered_ && first_line - answered_ <= slots_.size() &&
                     slots_[first_line - answered_ - 1].state == ReplySlot::State::kWaiting && count <= outstanding_;
  assert(fresh && "Complete() with a ticket that was completed already or never issued");
  if (!fresh) return;
  outstanding_ -= count;
  std::uint64_t accepted = 0;
  std::size_t i = 0;
  for (auto it = slots_.begin() + static_cast<std::ptrdiff_t>(first_line - answered_ - 1);
       i < count && it != slots_.end(); ++it) {
    if (it->state != ReplySlot::State::kWaiting) continue;
    const WriteOutcome o = i < outcomes.size() ? outcomes[i] : WriteOutcome{false, RejectReason::kStorageUnavailable};
    ++i;
    if (o.accepted) {
      it->state = ReplySlot::State::kOk;
      ++accepted;
    } else {
      it->state = ReplySlot::State::kReject;
      it->reason = o.reason;
      it->text = DescribeWriteReject(o.reason);
      counters_.rejected[static_cast<int>(o.reason)].fetch_add(1, std::memory_order_relaxed);
    }
  }
  if (accepted != 0) counters_.accepted.fetch_add(accepted, std::memory_order_relaxed);
}

// ---- output ----

// Moves the ready replies at the front into the output, then runs the
// EndMessage callbacks whose lines are all answered now.
void LineSession::Flush() {
  while (!slots_.empty() && slots_.front().state != ReplySlot::State::kWaiting) {
    const ReplySlot& slot = slots_.front();
    ++answered_;
    switch (slot.state) {
      case ReplySlot::State::kOk:
        out_ += "ok ";
        AppendNumber(out_, ++accepted_count_);
        break;
      case ReplySlot::State::kText:
        out_ += slot.text;
        break;
      case ReplySlot::State::kReject:
        out_ += "error ";
        AppendNumber(out_, answered_);
        out_ += ' ';
        out_ += RejectCode(slot.reason);
        out_ += ' ';
        out_ += slot.text;
        break;
      case ReplySlot::State::kWaiting:
        break;  // not reached (loop condition)
    }
    out_ += '\n';
    slots_.pop_front();
  }
  while (!waiters_.empty() && waiters_.front().line <= answered_) {
    AnsweredWaiter w = std::move(waiters_.front());
    waiters_.pop_front();
    w.done(w.line);
  }
}

void LineSession::TakeReplies(std::string& out) {
  out.clear();
  out.swap(out_);
  unsent_taken_ += out.size();
}

void LineSession::RepliesSent(std::size_t bytes) { unsent_taken_ -= bytes < unsent_taken_ ? bytes : unsent_taken_; }

// ---- state ----

bool LineSession::WantsInput() const {
  return input_open_ && outstanding_ <= options_.max_outstanding && pending_output() <= options_.max_pending_output;
}

bool LineSession::Finished() const {
  return !input_open_ && outstanding_ == 0 && slots_.empty() && out_.empty() && unsent_taken_ == 0;
}

}  // namespace lyapcast
