// GET /metrics (Prometheus text exposition format, version 0.0.4) and
// GET /v1/health.
#include <fmt/format.h>

#include <cmath>

#include "api_feed_view.h"
#include "api_routes.h"
#include "core/reject_reason.h"
#include "core/wall_clock.h"
#include "ingest_server.h"
#include "store/sample_writer.h"

namespace lyapcast::api {
namespace {

// Label values escape backslash, double quote and newline.
std::string Label(std::string_view v) {
  std::string out;
  for (char ch : v) {
    if (ch == '\\' || ch == '"') out += '\\';
    if (ch == '\n') {
      out += "\\n";
      continue;
    }
    out += ch;
  }
  return out;
}

class Exposition {
 public:
  void Family(std::string_view name, std::string_view type, std::string_view help) {
    text_ += fmt::format("# HELP {} {}\n# TYPE {} {}\n", name, help, name, type);
  }
  void Sample(std::string_view name, std::string_view labels, double value) {
    if (!std::isfinite(value)) return;  // unknown figures are left out, not NaN
    text_ += labels.empty() ? fmt::format("{} {}\n", name, value) : fmt::format("{}{{{}}} {}\n", name, labels, value);
  }
  std::string Take() { return std::move(text_); }

 private:
  std::string text_;
};

std::string FeedLabel(const FeedConfig& f) { return fmt::format("feed=\"{}\"", Label(f.id)); }

}  // namespace

HttpResponse Health(const ApiContext& c) {
  const WallTime now = WallNow();
  Verdict overall = Verdict::kNormal;
  json feeds = json::array();
  for (std::uint32_t i = 0; i < c.config->feeds.size(); ++i) {
    const FeedView v = ViewFeed(c, i, now);
    overall = WorseVerdict(overall, v.health.verdict);
    feeds.push_back({{"id", v.config->id}, {"verdict", VerdictName(v.health.verdict)}, {"reasons", v.health.reasons}});
  }
  return Json(overall == Verdict::kAlarm ? 503 : 200,
              json{{"status", VerdictName(overall)},
                   {"storage_available", c.writer->storage_available()},
                   {"feeds", std::move(feeds)}});
}

namespace {

// The daemon itself and its ingest.
void DaemonFamilies(const ApiContext& c, WallTime now, Exposition& m) {
  m.Family("lyapcast_build_info", "gauge", "The running lyapcastd version.");
  m.Sample("lyapcast_build_info", fmt::format("version=\"{}\"", Label(c.version)), 1);
  m.Family("lyapcast_uptime_seconds", "gauge", "Wall time since the daemon started.");
  m.Sample("lyapcast_uptime_seconds", "", Seconds(now - c.started_wall));

  if (c.ingest != nullptr) {
    const IngestCounters& k = c.ingest->counters();
    m.Family("lyapcast_ingest_connections", "gauge", "Open ingest connections.");
    m.Sample("lyapcast_ingest_connections", "", c.ingest->active_connections());
    m.Family("lyapcast_ingest_connections_accepted_total", "counter", "Ingest connections accepted.");
    m.Sample("lyapcast_ingest_connections_accepted_total", "", static_cast<double>(k.connections_accepted.load()));
    m.Family("lyapcast_ingest_connections_refused_total", "counter", "Ingest connections refused (limit reached).");
    m.Sample("lyapcast_ingest_connections_refused_total", "", static_cast<double>(k.connections_refused.load()));
    m.Family("lyapcast_ingest_lines_total", "counter", "Ingest lines received.");
    m.Sample("lyapcast_ingest_lines_total", "", static_cast<double>(k.lines.load()));
    m.Family("lyapcast_ingest_accepted_total", "counter", "Samples acknowledged after commit.");
    m.Sample("lyapcast_ingest_accepted_total", "", static_cast<double>(k.accepted.load()));
    m.Family("lyapcast_ingest_rejected_total", "counter", "Rejected ingest lines by reason code.");
    for (int r = 0; r < kRejectReasonCount; ++r) {
      m.Sample("lyapcast_ingest_rejected_total",
               fmt::format("reason=\"{}\"", RejectCode(static_cast<RejectReason>(r))),
               static_cast<double>(k.rejected[r].load()));
    }
  }
}

// The store writer: queue, commits, pruning, commit latency.
void WriterFamilies(const ApiContext& c, Exposition& m) {
  const WriterStats w = c.writer->stats();
  m.Family("lyapcast_writer_queue_samples", "gauge", "Samples queued for the store writer.");
  m.Sample("lyapcast_writer_queue_samples", "", static_cast<double>(c.writer->queued_samples()));
  m.Family("lyapcast_storage_available", "gauge", "1 when the last commit succeeded.");
  m.Sample("lyapcast_storage_available", "", c.writer->storage_available() ? 1 : 0);
  m.Family("lyapcast_samples_committed_total", "counter", "Samples stored.");
  m.Sample("lyapcast_samples_committed_total", "", static_cast<double>(w.samples_committed));
  m.Family("lyapcast_commit_failures_total", "counter", "Commits that failed (disk full, I/O error).");
  m.Sample("lyapcast_commit_failures_total", "", static_cast<double>(w.failed_commits));
  m.Family("lyapcast_rows_pruned_total", "counter", "Samples deleted by retention.");
  m.Sample("lyapcast_rows_pruned_total", "", static_cast<double>(w.rows_pruned));
  m.Family("lyapcast_commit_duration_seconds", "histogram", "Wall time of each group commit, fsync included.");
  for (std::size_t b = 0; b < CommitLatency::kBuckets; ++b) {
    m.Sample("lyapcast_commit_duration_seconds_bucket", fmt::format("le=\"{}\"", CommitLatency::kBounds[b]),
             static_cast<double>(w.commit_latency.le[b]));
  }
  m.Sample("lyapcast_commit_duration_seconds_bucket", "le=\"+Inf\"", static_cast<double>(w.commit_latency.count));
  m.Sample("lyapcast_commit_duration_seconds_sum", "", w.commit_latency.sum_seconds);
  m.Sample("lyapcast_commit_duration_seconds_count", "", static_cast<double>(w.commit_latency.count));
}

// One sample per feed per family: window, health, drift, ages, cadence, jobs.
void FeedFamilies(const std::vector<FeedView>& views, Exposition& m) {
  const auto per_feed = [&](std::string_view name, std::string_view type, std::string_view help, auto value) {
    m.Family(name, type, help);
    for (const FeedView& v : views) m.Sample(name, FeedLabel(*v.config), value(v));
  };
  constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
  per_feed("lyapcast_feed_window_samples", "gauge", "Samples in the feed's stored window.",
           [](const FeedView& v) { return static_cast<double>(v.extent.count); });
  per_feed("lyapcast_feed_health", "gauge", "Health verdict as its exit code: 0 normal, 1 alert, 2 alarm, 3 indeterminate.",
           [](const FeedView& v) { return static_cast<double>(VerdictExitCode(v.health.verdict)); });
  per_feed("lyapcast_feed_paused", "gauge", "1 while the feed is paused (no retraining, no drift alarms).",
           [](const FeedView& v) { return v.schedule.paused ? 1.0 : 0.0; });
  per_feed("lyapcast_feed_model_version", "gauge", "Active model version (absent without a model).",
           [&](const FeedView& v) { return v.model ? static_cast<double>(v.model->record.version) : kNaN; });
  per_feed("lyapcast_feed_drift_ratio", "gauge", "Rolling one-step error over the validation error at promotion.",
           [&](const FeedView& v) { return v.drift.drift_ratio.value_or(kNaN); });
  per_feed("lyapcast_feed_drift_flag", "gauge", "1 while the change test's drift flag is raised.",
           [](const FeedView& v) { return v.drift.drift_flag ? 1.0 : 0.0; });
  per_feed("lyapcast_feed_drift_alarms_total", "counter", "Change-test alarms.",
           [](const FeedView& v) { return static_cast<double>(v.drift.alarms_total); });
  per_feed("lyapcast_feed_data_age_seconds", "gauge", "Wall time since the feed's last sample arrived.",
           [&](const FeedView& v) { return v.drift.data_age_s.value_or(kNaN); });
  per_feed("lyapcast_feed_model_age_seconds", "gauge", "Wall time since the active model was promoted.",
           [&](const FeedView& v) { return v.drift.model_age_s.value_or(kNaN); });
  per_feed("lyapcast_feed_since_training_lyapunov_times", "gauge",
           "Data time since the active model's training data ended, in Lyapunov times.",
           [&](const FeedView& v) { return v.since_training_lyapunov_times.value_or(kNaN); });
  per_feed("lyapcast_feed_lyapunov_time_seconds", "gauge", "Lyapunov time the cadence paces by (data time).",
           [&](const FeedView& v) {
             return v.exponent && v.exponent->lambda_max > 0 ? 1.0 / v.exponent->lambda_max : kNaN;
           });
  m.Family("lyapcast_retrain_jobs_total", "counter", "Finished retraining jobs by outcome.");
  for (const FeedView& v : views) {
    const std::string f = FeedLabel(*v.config);
    m.Sample("lyapcast_retrain_jobs_total", f + ",outcome=\"promoted\"", static_cast<double>(v.schedule.promoted));
    m.Sample("lyapcast_retrain_jobs_total", f + ",outcome=\"rejected\"", static_cast<double>(v.schedule.rejected));
    m.Sample("lyapcast_retrain_jobs_total", f + ",outcome=\"not_enough_data\"",
             static_cast<double>(v.schedule.not_enough_data));
    m.Sample("lyapcast_retrain_jobs_total", f + ",outcome=\"failed\"", static_cast<double>(v.schedule.failed));
  }
  m.Family("lyapcast_retrain_duration_seconds", "summary", "Wall time of finished retraining jobs.");
  for (const FeedView& v : views) {
    m.Sample("lyapcast_retrain_duration_seconds_sum", FeedLabel(*v.config), v.schedule.job_seconds_total);
    m.Sample("lyapcast_retrain_duration_seconds_count", FeedLabel(*v.config),
             static_cast<double>(v.schedule.jobs_finished));
  }
}

}  // namespace

HttpResponse Metrics(const ApiContext& c) {
  const WallTime now = WallNow();
  Exposition m;
  DaemonFamilies(c, now, m);
  WriterFamilies(c, m);
  std::vector<FeedView> views;
  for (std::uint32_t i = 0; i < c.config->feeds.size(); ++i) views.push_back(ViewFeed(c, i, now));
  FeedFamilies(views, m);
  HttpResponse r;
  r.content_type = "text/plain; version=0.0.4; charset=utf-8";
  r.body = m.Take();
  return r;
}

}  // namespace lyapcast::api
