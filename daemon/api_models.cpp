// Model history, model files, uploads, activation, retrain triggers, jobs,
// pause and resume (docs/http-api.md).
#include <fmt/format.h>

#include <charconv>

#include "api_feed_view.h"
#include "api_routes.h"
#include "api_store.h"
#include "core/wall_clock.h"
#include "runtime/feed_runtime.h"
#include "schedule/model_upload.h"

namespace lyapcast::api {
namespace {

std::optional<std::int64_t> ParsePositive(const std::string& text) {
  std::int64_t v = 0;
  const char* end = text.data() + text.size();
  const auto [ptr, ec] = std::from_chars(text.data(), end, v);
  if (ec != std::errc() || ptr != end || v < 1) return std::nullopt;
  return v;
}

}  // namespace

HttpResponse Status(const ApiContext& c, std::uint32_t feed) {
  return Json(200, StatusJson(c, ViewFeed(c, feed, WallNow())));
}

HttpResponse Models(const ApiContext& c, std::uint32_t feed, const HttpRequest& req) {
  auto limit = IntParam(req, "limit", 1, 1000);
  if (!limit.ok()) return FromStatus(limit.status());
  auto list = c.store->ListModels(feed, static_cast<int>(limit->value_or(50)));
  if (!list.ok()) return FromStatus(list.status());
  json models = json::array();
  for (const ModelRecord& r : *list) models.push_back(ModelJson(r));
  return Json(200, json{{"feed", c.config->feeds[feed].id}, {"models", std::move(models)}});
}

HttpResponse ModelFile(const ApiContext& c, std::uint32_t feed, const std::string& version) {
  const auto v = ParsePositive(version);
  const std::string& id = c.config->feeds[feed].id;
  if (!v) return Error(404, "not-found", fmt::format("feed {} has no model version '{}'", id, version));
  auto record = c.store->GetModel(feed, *v);
  if (!record.ok()) return FromStatus(record.status());
  HttpResponse r;
  r.content_type = "application/octet-stream";
  r.body = std::move(record->file);
  r.headers.emplace_back("Content-Disposition", fmt::format("attachment; filename=\"{}-v{}.lcm\"", id, *v));
  return r;
}

HttpResponse Activate(const ApiContext& c, std::uint32_t feed, const std::string& version) {
  const auto v = ParsePositive(version);
  const std::string& id = c.config->feeds[feed].id;
  if (!v) return Error(404, "not-found", fmt::format("feed {} has no model version '{}'", id, version));
  // An unknown version is 404 whatever the scheduler is doing (it refuses
  // any activation with 409 while a job of the feed runs).
  if (auto record = c.store->GetModel(feed, *v); !record.ok()) return FromStatus(record.status());
  const auto before = c.scheduler->active(feed);
  if (lyapcast::Status s = c.scheduler->Activate(feed, *v, "activated by an operator over the API"); !s.ok()) {
    return FromStatus(s);
  }
  return Json(200, json{{"feed", id},
                        {"active", *v},
                        {"previous", before ? json(before->record.version) : json(nullptr)}});
}

// The bytes are checked here (cheap; nothing is stored when they do not fit
// the feed); judging or activating runs as a scheduler job the client
// follows like a retrain's.
HttpResponse Upload(const ApiContext& c, std::uint32_t feed, const HttpRequest& req) {
  const FeedConfig& fc = c.config->feeds[feed];
  auto activate = BoolParam(req, "activate");
  if (!activate.ok()) return FromStatus(activate.status());
  UploadProblem problem = UploadProblem::kNone;
  auto upload = ValidateUpload(req.body, fc, &problem);
  if (!upload.ok()) {
    return Error(problem == UploadProblem::kTooLarge ? 413 : 400, UploadProblemCode(problem),
                 upload.status().message());
  }
  const std::size_t bytes = upload->file.size();
  const std::string file_feed = upload->file_feed;
  auto job = c.scheduler->Upload(feed, std::make_shared<const ValidatedUpload>(std::move(upload).value()),
                                 activate->value_or(false), "over the API");
  if (!job.ok()) return FromStatus(job.status());
  const auto info = c.scheduler->job(*job);
  HttpResponse r = Json(202, json{{"job", *job},
                                  {"feed", fc.id},
                                  {"state", info ? JobStateName(info->state) : "queued"},
                                  {"activate", activate->value_or(false)},
                                  {"bytes", bytes},
                                  {"file_feed", file_feed.empty() ? json(nullptr) : json(file_feed)}});
  r.headers.emplace_back("Location", fmt::format("/v1/feeds/{}/jobs/{}", fc.id, *job));
  return r;
}

HttpResponse Retrain(const ApiContext& c, std::uint32_t feed) {
  // Coalesced: the trigger joined a job that was already pending, which
  // the scheduler counts. (Judging by a `pending` flag read before the
  // trigger would be wrong when the trainer starts that job in between: the
  // trigger then queues a new job.)
  const std::uint64_t coalesced_before = c.scheduler->schedule(feed).coalesced;
  auto job = c.scheduler->Trigger(feed, TriggerKind::kOperator, "requested over the API");
  if (!job.ok()) return FromStatus(job.status());
  const bool coalesced = c.scheduler->schedule(feed).coalesced > coalesced_before;
  const auto info = c.scheduler->job(*job);
  json body = {{"job", *job},
               {"feed", c.config->feeds[feed].id},
               {"state", info ? JobStateName(info->state) : "queued"},
               {"coalesced", coalesced}};
  HttpResponse r = Json(202, body);
  r.headers.emplace_back("Location", fmt::format("/v1/feeds/{}/jobs/{}", c.config->feeds[feed].id, *job));
  return r;
}

HttpResponse Job(const ApiContext& c, std::uint32_t feed, const std::string& job) {
  const auto id = ParsePositive(job);
  const std::string& name = c.config->feeds[feed].id;
  const auto info = id ? c.scheduler->job(static_cast<std::uint64_t>(*id)) : std::nullopt;
  if (!info || info->feed != feed) {
    return Error(404, "not-found", fmt::format("feed {} has no job '{}' (the newest 256 jobs are kept)", name, job));
  }
  return Json(200, JobJson(*c.config, *info));
}

HttpResponse Pause(const ApiContext& c, std::uint32_t feed, bool paused) {
  if (lyapcast::Status s = c.scheduler->SetPaused(feed, paused); !s.ok()) return FromStatus(s);
  c.runtimes->at(feed).SetPaused(paused);
  return Json(200, json{{"feed", c.config->feeds[feed].id}, {"paused", paused}});
}

}  // namespace lyapcast::api
