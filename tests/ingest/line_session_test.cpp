// LineSession against an in-memory sink: framing, auth, ordered replies,
// backpressure, message notifications and counters, with no sockets and no
// threads. The sink keeps every submission until a test completes it, so
// the order in which outcomes arrive is the test's choice.
#include "ingest/line_session.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cstdint>
#include <memory>
#include <random>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

namespace lyapcast {
namespace {

using R = RejectReason;

constexpr DataTime kT0 = DataTimeFromMicros(1733097600LL * 1'000'000);  // 2024-12-02T00:00:00Z
constexpr WallTime kNow = WallTimeAtData(kT0 + 5 * kSecond);  // the session's wall clock in these tests

Config MakeConfig() {
  Config config;
  FeedConfig a;
  a.id = "loop-a";
  a.channels = {"flow", "dtemp_h", "dtemp_v"};
  FeedConfig b;
  b.id = "rig-b";
  b.channels = {"x", "y"};
  config.feeds = {a, b};
  return config;
}

const Config& TestConfig() {
  static const Config config = MakeConfig();
  return config;
}

// A good rig-b line (without its newline) at kT0 + i * 10 ms, value x = i.
std::string Good(int i) {
  const std::int64_t t = EpochMicros(kT0) + i * 10'000;
  const std::string micros = std::to_string(1'000'000 + t % 1'000'000).substr(1);  // six digits
  return "rig-b," + std::to_string(t / 1'000'000) + "." + micros + "," + std::to_string(i) + ",2";
}

constexpr std::string_view kBad = "rig-b,1733097600,1";  // field-count: rig-b has two channels

// Keeps submissions until the test completes them.
class MemorySink : public SampleSink {
 public:
  struct Submission {
    std::vector<FeedSample> samples;
    SubmissionTicket ticket;
  };

  bool Submit(std::vector<FeedSample> samples, SubmissionTicket ticket) override {
    if (refuse) return false;
    EXPECT_FALSE(samples.empty());
    EXPECT_EQ(samples.size(), ticket.samples());
    submissions.push_back(Submission{std::move(samples), ticket});
    return true;
  }

  bool refuse = false;
  std::vector<Submission> submissions;  // in Submit order; completing does not remove them
};

std::vector<WriteOutcome> AllAccepted(std::size_t n) { return std::vector<WriteOutcome>(n, WriteOutcome{true, {}}); }

class LineSessionTest : public ::testing::Test {
 protected:
  LineSessionOptions Options() {
    LineSessionOptions o;
    o.wall_clock = [] { return kNow; };
    return o;
  }

  void Open(LineSessionOptions o) {
    session_ = std::make_unique<LineSession>(TestConfig(), sink_, counters_, std::move(o));
  }
  void SetUp() override { Open(Options()); }

  LineSession& s() { return *session_; }

  // Completes submission `i` with every sample accepted.
  void Accept(std::size_t i) {
    ASSERT_LT(i, sink_.submissions.size());
    s().Complete(sink_.submissions[i].ticket, AllAccepted(sink_.submissions[i].samples.size()));
  }
  void AcceptAll() {
    for (std::size_t i = completed_; i < sink_.submissions.size(); ++i) Accept(i);
    completed_ = sink_.submissions.size();
  }

  // Takes the replies ready now, as lines, and reports them sent.
  std::vector<std::string> Take() {
    std::string text;
    s().TakeReplies(text);
    s().RepliesSent(text.size());
    std::vector<std::string> lines;
    std::size_t start = 0;
    for (std::size_t nl; (nl = text.find('\n', start)) != std::string::npos; start = nl + 1) {
      lines.push_back(text.substr(start, nl - start));
    }
    EXPECT_EQ(start, text.size()) << "replies end with a newline";
    return lines;
  }

  MemorySink sink_;
  IngestCounters counters_;
  std::unique_ptr<LineSession> session_;
  std::size_t completed_ = 0;  // AcceptAll's progress
};

// True when `actual` has one line per pattern; a pattern ending in '*'
// matches any line that starts with the text before it.
::testing::AssertionResult Replies(const std::vector<std::string>& actual, const std::vector<std::string>& patterns) {
  auto show = [&actual] {
    std::string all;
    for (const auto& line : actual) all += "\n  " + line;
    return all;
  };
  if (actual.size() != patterns.size()) {
    return ::testing::AssertionFailure() << patterns.size() << " replies expected, got " << actual.size() << ":"
                                         << show();
  }
  for (std::size_t i = 0; i < patterns.size(); ++i) {
    const std::string& p = patterns[i];
    const bool ok = !p.empty() && p.back() == '*' ? actual[i].compare(0, p.size() - 1, p, 0, p.size() - 1) == 0
                                                  : actual[i] == p;
    if (!ok) return ::testing::AssertionFailure() << "reply " << i + 1 << " does not match '" << p << "':" << show();
  }
  return ::testing::AssertionSuccess();
}

// ---------------------------------------------------------------------------
// Framing

TEST_F(LineSessionTest, LineSplitOverManyCallsIsOneLine) {
  const std::string line = Good(1) + "\n";
  for (std::size_t i = 0; i + 1 < line.size(); ++i) s().Consume(line.substr(i, 1));
  EXPECT_TRUE(sink_.submissions.empty()) << "nothing submitted before the newline";
  EXPECT_EQ(s().lines_received(), 0u);
  s().Consume("\n");
  ASSERT_EQ(sink_.submissions.size(), 1u);
  ASSERT_EQ(sink_.submissions[0].samples.size(), 1u);
  EXPECT_EQ(sink_.submissions[0].samples[0].feed, 1u);
  EXPECT_EQ(sink_.submissions[0].samples[0].sample.t, kT0 + Micros(10'000));
  EXPECT_EQ(sink_.submissions[0].samples[0].sample.values, (std::vector<double>{1, 2}));
  AcceptAll();
  EXPECT_TRUE(Replies(Take(), {"ok 1"}));
}

TEST_F(LineSessionTest, CrlfEmptyLinesAndUnterminatedLastLine) {
  s().Consume(Good(1) + "\r\n\r\n\n" + Good(2));
  EXPECT_EQ(s().lines_received(), 3u) << "the unterminated last line waits";
  s().EndInput();
  EXPECT_EQ(s().lines_received(), 4u) << "at end of input it counts";
  AcceptAll();
  const auto replies = Take();
  ASSERT_EQ(replies.size(), 4u);
  EXPECT_EQ(replies[0], "ok 1");
  EXPECT_EQ(replies[1].rfind("error 2 field-count empty line", 0), 0u) << replies[1];
  EXPECT_EQ(replies[2].rfind("error 3 field-count empty line", 0), 0u) << replies[2];
  EXPECT_EQ(replies[3], "ok 2");
  EXPECT_EQ(sink_.submissions[1].samples[0].sample.t, kT0 + Micros(20'000));
  EXPECT_TRUE(s().Finished());
}

// The same input cut at every chunk size and at random places gives the
// same replies as one call with everything.
TEST_F(LineSessionTest, RepliesDoNotDependOnChunkBoundaries) {
  std::string input;
  int lines = 0, samples = 0;
  for (int i = 0; i < 40; ++i) {
    input += Good(i);
    input += (i % 3 == 0) ? "\r\n" : "\n";
    lines += 1, samples += 1;
    if (i % 7 == 3) input += std::string(kBad) + "\n", lines += 1;
    if (i % 11 == 5) input += "\n", lines += 1;
    if (i % 13 == 2) {
      input += R"({"feed":"loop-a","t":1733097600.5,"values":{"flow":0.5}})" "\n";
      lines += 1, samples += 1;
    }
  }
  input += Good(99);  // unterminated
  lines += 1, samples += 1;

  auto run = [&](const std::vector<std::size_t>& cuts) {
    MemorySink sink;
    IngestCounters counters;
    LineSession session(TestConfig(), sink, counters, Options());
    std::size_t from = 0;
    for (std::size_t cut : cuts) {
      session.Consume(std::string_view(input).substr(from, cut - from));
      from = cut;
    }
    session.Consume(std::string_view(input).substr(from));
    session.EndInput();
    for (auto& sub : sink.submissions) session.Complete(sub.ticket, AllAccepted(sub.samples.size()));
    std::string text;
    session.TakeReplies(text);
    return text;
  };

  const std::string whole = run({});
  EXPECT_EQ(std::count(whole.begin(), whole.end(), '\n'), lines);
  EXPECT_TRUE(whole.ends_with("ok " + std::to_string(samples) + "\n")) << whole;
  for (std::size_t step : {1, 2, 3, 5, 17, 64, 1000}) {
    std::vector<std::size_t> cuts;
    for (std::size_t c = step; c < input.size(); c += step) cuts.push_back(c);
    EXPECT_EQ(run(cuts), whole) << "chunks of " << step;
  }
  std::mt19937 rng(12345);
  for (int trial = 0; trial < 20; ++trial) {
    std::vector<std::size_t> cuts;
    std::uniform_int_distribution<std::size_t> gap(0, 90);
    for (std::size_t c = gap(rng); c < input.size(); c += gap(rng)) cuts.push_back(c);
    EXPECT_EQ(run(cuts), whole) << "random cuts, trial " << trial;
  }
}

TEST_F(LineSessionTest, StopInputDropsThePartialLine) {
  s().Consume(Good(1) + "\n" + Good(2));
  s().StopInput();
  EXPECT_FALSE(s().AcceptsInput());
  EXPECT_FALSE(s().WantsInput());
  s().Consume("\n");  // ignored after the input ended
  EXPECT_EQ(s().lines_received(), 1u);
  EXPECT_FALSE(s().Finished()) << "line 1 still awaits its commit";
  AcceptAll();
  EXPECT_TRUE(Replies(Take(), {"ok 1"}));
  EXPECT_TRUE(s().Finished());
}

// ---------------------------------------------------------------------------
// line-too-long

class LineSessionLongLineTest : public LineSessionTest {
 protected:
  static constexpr std::size_t kMax = 48;
  void SetUp() override {
    LineSessionOptions o = Options();
    o.max_line = kMax;
    Open(std::move(o));
  }
  // A good line of exactly `size` bytes (the value of x padded with zeros).
  static std::string GoodOfSize(std::size_t size) {
    std::string line = "rig-b,1733097600.25,1.,2";
    line.insert(line.size() - 2, size - line.size(), '0');
    return line;
  }
};

TEST_F(LineSessionLongLineTest, AnsweredOnceAndTheSessionStaysUsable) {
  const std::string huge(5000, '9');
  // Over many calls (the partial-line path), then within one call.
  for (std::size_t i = 0; i < huge.size(); i += 7) s().Consume(std::string_view(huge).substr(i, 7));
  s().Consume("\n" + GoodOfSize(kMax) + "\r\n" + huge + "\n" + GoodOfSize(kMax) + "\n" + GoodOfSize(kMax + 1) + "\n");
  AcceptAll();
  const auto replies = Take();
  ASSERT_EQ(replies.size(), 5u);
  EXPECT_EQ(replies[0], "error 1 line-too-long line exceeds 48 bytes (limits.max_line); the rest of it is skipped");
  EXPECT_EQ(replies[1], "ok 1") << "exactly max_line bytes plus CRLF fits";
  EXPECT_EQ(replies[2].rfind("error 3 line-too-long ", 0), 0u) << replies[2];
  EXPECT_EQ(replies[3], "ok 2");
  EXPECT_EQ(replies[4].rfind("error 5 line-too-long ", 0), 0u) << replies[4];
  EXPECT_EQ(counters_.rejected[static_cast<int>(R::kLineTooLong)].load(), 3u);
  EXPECT_EQ(counters_.lines.load(), 5u);
}

TEST_F(LineSessionLongLineTest, SkippedTailAtEndOfInputIsNotASecondLine) {
  s().Consume(std::string(200, 'x'));
  s().Consume(std::string(200, 'x'));
  s().EndInput();
  const auto replies = Take();
  ASSERT_EQ(replies.size(), 1u);
  EXPECT_EQ(replies[0].rfind("error 1 line-too-long ", 0), 0u) << replies[0];
  EXPECT_TRUE(s().Finished());
}

// ---------------------------------------------------------------------------
// Auth

class LineSessionAuthTest : public LineSessionTest {
 protected:
  void SetUp() override {
    LineSessionOptions o = Options();
    o.token = "s3cret-token";
    Open(std::move(o));
  }
};

TEST_F(LineSessionAuthTest, RightTokenFirstIsAccepted) {
  s().Consume("auth s3cr");  // split over calls like any line
  s().Consume("et-token\r\n" + Good(1) + "\nauth s3cret-token\n");
  AcceptAll();
  EXPECT_TRUE(Replies(Take(), {"ok auth", "ok 1", "ok auth"}));
  EXPECT_EQ(s().auth_failure(), LineSession::AuthFailure::kNone);
  EXPECT_TRUE(s().AcceptsInput());
}

TEST_F(LineSessionAuthTest, WrongTokenIsRefusedAndEndsTheInput) {
  s().Consume("auth wrong\n" + Good(1) + "\n");
  EXPECT_TRUE(Replies(Take(), {"error 1 bad-auth wrong ingest token"}));
  EXPECT_TRUE(sink_.submissions.empty()) << "nothing after a refused token is read";
  EXPECT_EQ(s().auth_failure(), LineSession::AuthFailure::kWrongToken);
  EXPECT_FALSE(s().AcceptsInput());
  EXPECT_TRUE(s().Finished());
  s().Consume(Good(2) + "\n");
  EXPECT_TRUE(Take().empty());
  EXPECT_EQ(s().lines_received(), 1u);
}

TEST_F(LineSessionAuthTest, MissingAuthIsRefused) {
  s().Consume(Good(1) + "\n");
  EXPECT_TRUE(Replies(Take(), {"error 1 bad-auth this server requires 'auth <token>' as the first line"}));
  EXPECT_EQ(s().auth_failure(), LineSession::AuthFailure::kMissing);
  EXPECT_TRUE(sink_.submissions.empty());
  EXPECT_TRUE(s().Finished());
}

TEST_F(LineSessionAuthTest, RightTokenAfterTheFirstLineIsRefused) {
  s().Consume(std::string(kBad) + "\nauth s3cret-token\n");
  EXPECT_TRUE(Replies(Take(), {"error 1 bad-auth this server requires 'auth <token>' as the first line"}));
  EXPECT_FALSE(s().AcceptsInput());
}

TEST_F(LineSessionTest, AuthLineWithoutATokenConfiguredIsAccepted) {
  s().Consume("auth anything\n" + Good(1) + "\n");
  AcceptAll();
  EXPECT_TRUE(Replies(Take(), {"ok auth", "ok 1"}));
}

// ---------------------------------------------------------------------------
// Ordered replies

TEST_F(LineSessionTest, OutOfOrderCompletionsAnswerInLineOrder) {
  s().Consume(Good(1) + "\n" + Good(2) + "\n");
  s().Consume(std::string(kBad) + "\n" + Good(3) + "\n");
  s().Consume(Good(4) + "\n");
  ASSERT_EQ(sink_.submissions.size(), 3u);
  EXPECT_EQ(s().outstanding(), 4u);
  EXPECT_TRUE(Take().empty()) << "line 1 waits, so everything after it waits";

  Accept(2);
  EXPECT_TRUE(Take().empty());
  EXPECT_EQ(s().lines_answered(), 0u);
  Accept(1);
  EXPECT_TRUE(Take().empty());
  EXPECT_EQ(s().outstanding(), 2u);
  Accept(0);
  EXPECT_TRUE(Replies(Take(), {"ok 1", "ok 2", "error 3 field-count *", "ok 3", "ok 4"}));
  EXPECT_EQ(s().lines_answered(), 5u);
  EXPECT_EQ(s().outstanding(), 0u);
}

TEST_F(LineSessionTest, RejectedLinesWaitBehindEarlierSamples) {
  s().Consume(Good(1) + "\n" + std::string(kBad) + "\n" + Good(2) + "\n" + std::string(kBad) + "\n");
  ASSERT_EQ(sink_.submissions.size(), 1u);
  EXPECT_EQ(sink_.submissions[0].samples.size(), 2u) << "one batch per input call";
  EXPECT_TRUE(Take().empty());
  AcceptAll();
  EXPECT_TRUE(Replies(Take(), {"ok 1", "error 2 field-count *", "ok 2",
                                  "error 4 field-count *"}));
}

TEST_F(LineSessionTest, RejectsBeforeAnyWaitingSampleAreAnsweredAtOnce) {
  s().Consume(std::string(kBad) + "\n" + Good(1) + "\n");
  EXPECT_TRUE(Replies(Take(), {"error 1 field-count *"}));
  AcceptAll();
  EXPECT_TRUE(Replies(Take(), {"ok 1"}));
}

TEST_F(LineSessionTest, StoreOutcomesMapToTheirCodes) {
  s().Consume(Good(1) + "\n" + Good(2) + "\n" + std::string(kBad) + "\n" + Good(3) + "\n" + Good(4) + "\n" + Good(5) +
              "\n");
  ASSERT_EQ(sink_.submissions.size(), 1u);
  s().Complete(sink_.submissions[0].ticket, {WriteOutcome{true, {}}, WriteOutcome{false, R::kStorageUnavailable},
                                             WriteOutcome{false, R::kTooOld}, WriteOutcome{false, R::kDuplicateTime},
                                             WriteOutcome{true, {}}});
  EXPECT_TRUE(Replies(Take(), {"ok 1",
                               "error 2 storage-unavailable the store cannot commit right now "
                               "(disk full or I/O error); resend later",
                               "error 3 field-count *",
                               "error 4 too-old sample is older than the feed's newest sample minus storage.retention",
                               "error 5 duplicate-time a channel of this feed is already stored at this time with a different value",
                               "ok 2"}));
  EXPECT_EQ(counters_.rejected[static_cast<int>(R::kStorageUnavailable)].load(), 1u);
  EXPECT_EQ(counters_.rejected[static_cast<int>(R::kTooOld)].load(), 1u);
  EXPECT_EQ(counters_.accepted.load(), 2u);
}

TEST_F(LineSessionTest, MissingOutcomesCountAsStorageUnavailable) {
  s().Consume(Good(1) + "\n" + Good(2) + "\n");
  s().Complete(sink_.submissions[0].ticket, {WriteOutcome{true, {}}});
  EXPECT_TRUE(Replies(Take(), {"ok 1", "error 2 storage-unavailable *"}));
  EXPECT_EQ(s().outstanding(), 0u);
}

TEST_F(LineSessionTest, RefusingSinkAnswersShuttingDown) {
  sink_.refuse = true;
  s().Consume(Good(1) + "\n" + Good(2) + "\n");
  EXPECT_TRUE(Replies(Take(), {"error 1 shutting-down the daemon is shutting down; resend after it restarts",
                                  "error 2 shutting-down *"}));
  EXPECT_EQ(s().outstanding(), 0u);
  EXPECT_EQ(counters_.rejected[static_cast<int>(R::kShuttingDown)].load(), 2u);
}

TEST_F(LineSessionTest, FutureTimeUsesTheSessionClock) {
  // kNow is kT0 + 5 s and the skew 10 s: 14 s ahead passes, 16 s does not.
  s().Consume("rig-b,1733097614,1,2\nrig-b,1733097616,1,2\n");
  AcceptAll();
  EXPECT_TRUE(Replies(Take(), {"ok 1", "error 2 future-time *"}));
}

// ---------------------------------------------------------------------------
// Backpressure

TEST_F(LineSessionTest, OutstandingSamplesPauseInputAboveTheLimit) {
  LineSessionOptions o = Options();
  o.max_outstanding = 3;
  Open(std::move(o));
  s().Consume(Good(1) + "\n" + Good(2) + "\n" + Good(3) + "\n");
  EXPECT_EQ(s().outstanding(), 3u);
  EXPECT_TRUE(s().WantsInput()) << "at the limit, not above it";
  s().Consume(Good(4) + "\n");
  EXPECT_EQ(s().outstanding(), 4u);
  EXPECT_FALSE(s().WantsInput());
  s().Consume(Good(5) + "\n");  // a transport that cannot pause is still served
  EXPECT_EQ(s().outstanding(), 5u);
  Accept(0);
  EXPECT_EQ(s().outstanding(), 2u);
  EXPECT_TRUE(s().WantsInput()) << "back at or below the limit";
}

TEST_F(LineSessionTest, UnsentRepliesPauseInputUntilSent) {
  LineSessionOptions o = Options();
  o.max_pending_output = 20;
  Open(std::move(o));
  s().Consume(Good(1) + "\n" + Good(2) + "\n" + Good(3) + "\n" + Good(4) + "\n");
  AcceptAll();  // "ok 1\nok 2\nok 3\nok 4\n": 20 bytes
  EXPECT_EQ(s().pending_output(), 20u);
  EXPECT_TRUE(s().WantsInput()) << "at the limit, not above it";
  s().Consume(Good(5) + "\n");
  AcceptAll();
  EXPECT_EQ(s().pending_output(), 25u);
  EXPECT_FALSE(s().WantsInput());

  std::string text;
  s().TakeReplies(text);
  EXPECT_EQ(text, "ok 1\nok 2\nok 3\nok 4\nok 5\n");
  EXPECT_FALSE(s().HasReplies());
  EXPECT_EQ(s().pending_output(), 25u) << "taken is not sent";
  EXPECT_FALSE(s().WantsInput());
  s().RepliesSent(4);
  EXPECT_FALSE(s().WantsInput()) << "21 bytes still unsent";
  s().RepliesSent(1);
  EXPECT_EQ(s().pending_output(), 20u);
  EXPECT_TRUE(s().WantsInput());
  s().RepliesSent(20);
  EXPECT_EQ(s().pending_output(), 0u);
}

// ---------------------------------------------------------------------------
// Messages (a transport that acknowledges a message once all of it is answered)

TEST_F(LineSessionTest, EndMessageNotifiesOnceEveryLineIsAnswered) {
  std::vector<std::uint64_t> notified;
  auto note = [&notified](std::uint64_t last) { notified.push_back(last); };

  s().Consume(Good(1) + "\n" + std::string(kBad) + "\n" + Good(2));  // the last line is unterminated
  EXPECT_EQ(s().EndMessage(note), 3u) << "the message's last line counts at its end";
  EXPECT_TRUE(notified.empty()) << "samples of the message still await their commit";
  s().Consume(std::string(kBad));  // a message of one rejected line, after one still waiting
  EXPECT_EQ(s().EndMessage(note), 4u);
  s().Consume(Good(3) + "\n");
  EXPECT_EQ(s().EndMessage(note), 5u);
  ASSERT_EQ(sink_.submissions.size(), 3u) << "line 1; line 3 at the message's end; line 5";

  Accept(2);  // the third message's commit arrives first
  EXPECT_TRUE(notified.empty());
  Accept(0);
  EXPECT_TRUE(notified.empty()) << "line 3 still waits";
  EXPECT_EQ(s().lines_answered(), 2u);
  Accept(1);
  EXPECT_EQ(notified, (std::vector<std::uint64_t>{3, 4, 5})) << "in message order, each once";
  EXPECT_TRUE(Replies(Take(), {"ok 1", "error 2 field-count *", "ok 2",
                                  "error 4 field-count *", "ok 3"}));
}

TEST_F(LineSessionTest, EndMessageWithEverythingAnsweredNotifiesAtOnce) {
  std::uint64_t notified = 0;
  s().Consume(std::string(kBad) + "\n");
  EXPECT_EQ(s().EndMessage([&notified](std::uint64_t last) { notified = last; }), 1u);
  EXPECT_EQ(notified, 1u);
  EXPECT_EQ(s().EndMessage([&notified](std::uint64_t last) { notified = last + 100; }), 1u) << "an empty message";
  EXPECT_EQ(notified, 101u);
}

TEST_F(LineSessionTest, NextMessageStartsAFreshLine) {
  s().Consume("rig-b,1733097600.01");
  s().EndMessage();
  s().Consume(",1,2\n");
  AcceptAll();
  EXPECT_TRUE(Replies(Take(), {"error 1 field-count *", "error 2 unknown-feed *"}));
}

TEST_F(LineSessionTest, NotificationMayTakeTheReplies) {
  std::string taken;
  s().Consume(Good(1) + "\n" + Good(2) + "\n");
  s().EndMessage([this, &taken](std::uint64_t) {
    s().TakeReplies(taken);
    s().RepliesSent(taken.size());
  });
  AcceptAll();
  EXPECT_EQ(taken, "ok 1\nok 2\n");
  EXPECT_EQ(s().pending_output(), 0u);
}

// ---------------------------------------------------------------------------
// Counters and lifetime

TEST_F(LineSessionTest, CountersAddUpAcrossSessions) {
  s().Consume(Good(1) + "\n" + std::string(kBad) + "\n" + Good(2) + "\n" + "loop-z,1733097600,1,2,3\n");
  EXPECT_EQ(counters_.lines.load(), 4u);
  EXPECT_EQ(counters_.accepted.load(), 0u) << "accepted only after the commit";
  AcceptAll();
  EXPECT_EQ(counters_.accepted.load(), 2u);

  LineSession second(TestConfig(), sink_, counters_, Options());  // a second connection, same totals
  second.Consume(Good(3) + "\n\n");
  second.Complete(sink_.submissions.back().ticket, {WriteOutcome{false, R::kDuplicateTime}});
  EXPECT_EQ(counters_.lines.load(), 6u);
  EXPECT_EQ(counters_.accepted.load(), 2u);
  EXPECT_EQ(counters_.rejected[static_cast<int>(R::kFieldCount)].load(), 2u);
  EXPECT_EQ(counters_.rejected[static_cast<int>(R::kUnknownFeed)].load(), 1u);
  EXPECT_EQ(counters_.rejected[static_cast<int>(R::kDuplicateTime)].load(), 1u);
  std::uint64_t rejected = 0;
  for (const auto& r : counters_.rejected) rejected += r.load();
  EXPECT_EQ(rejected, 4u);
  EXPECT_EQ(counters_.connections_accepted.load(), 0u) << "the transport's to count";
}

TEST_F(LineSessionTest, FinishedOnlyWhenEverythingIsAnsweredAndSent) {
  s().Consume(Good(1) + "\n");
  s().EndInput();
  EXPECT_FALSE(s().Finished()) << "a sample awaits its commit";
  AcceptAll();
  EXPECT_TRUE(s().HasReplies());
  EXPECT_FALSE(s().Finished()) << "a reply is not taken";
  std::string text;
  s().TakeReplies(text);
  EXPECT_FALSE(s().Finished()) << "a reply is not sent";
  s().RepliesSent(text.size());
  EXPECT_TRUE(s().Finished());
}

}  // namespace
}  // namespace lyapcast
