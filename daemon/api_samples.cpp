// GET /v1/feeds/{id}/samples: a page of stored samples, as JSON or as
// ingest-format CSV so an export can be replayed.
#include <fmt/format.h>

#include <cmath>
#include <limits>
#include <optional>

#include "api_common.h"
#include "api_routes.h"
#include "api_store.h"

namespace lyapcast::api {
namespace {

// `Link: <...>; rel="next"` (RFC 8288) to the next page: the same request
// from `next` on. Every value is an epoch number, an integer or a format
// word, so nothing needs percent-encoding.
std::string NextLink(const FeedConfig& fc, DataTime next, std::optional<DataTime> to, std::optional<std::int64_t> limit,
                     bool csv) {
  std::string target = fmt::format("/v1/feeds/{}/samples?from={}", fc.id, EpochText(next));
  if (to) target += "&to=" + EpochText(*to);
  if (limit) target += fmt::format("&limit={}", *limit);
  target += csv ? "&format=csv" : "&format=json";
  return fmt::format("<{}>; rel=\"next\"", target);
}

}  // namespace

HttpResponse Samples(const ApiContext& c, std::uint32_t feed, const HttpRequest& req) {
  const FeedConfig& fc = c.config->feeds[feed];
  auto from = TimeParam(req, "from");
  if (!from.ok()) return FromStatus(from.status());
  auto to = TimeParam(req, "to");
  if (!to.ok()) return FromStatus(to.status());
  auto limit = IntParam(req, "limit", 1, 10'000);
  if (!limit.ok()) return FromStatus(limit.status());
  const auto csv = WantsCsv(req);
  if (!csv.ok()) return FromStatus(csv.status());
  const DataTime lo = from->value_or(DataTime(Micros::min() / 2));
  const DataTime hi = to->value_or(DataTime(Micros::max() / 2));
  if (hi <= lo) return BadParameter("to", "must be later than from");
  auto page = c.store->ReadSamples(feed, lo, hi, static_cast<int>(limit->value_or(1000)));
  if (!page.ok()) return FromStatus(page.status());

  if (*csv) {
    HttpResponse r;
    r.content_type = "text/csv; charset=utf-8";
    for (const Sample& s : page->samples) {
      r.body += fc.id + "," + EpochText(s.t);
      for (std::size_t ch = 0; ch < s.values.size(); ++ch) {
        r.body += s.missing(static_cast<int>(ch)) ? "," : fmt::format(",{:.17g}", s.values[ch]);
      }
      r.body += '\n';
    }
    if (page->next) r.headers.emplace_back("Link", NextLink(fc, *page->next, *to, *limit, true));
    return r;
  }
  json samples = json::array();
  for (const Sample& s : page->samples) {
    json values = json::array();
    for (std::size_t ch = 0; ch < s.values.size(); ++ch) {
      values.push_back(s.missing(static_cast<int>(ch)) ? json(nullptr) : json(s.values[ch]));
    }
    samples.push_back({{"t", TimeJson(s.t)}, {"values", std::move(values)}});
  }
  HttpResponse r = Json(200, json{{"feed", fc.id},
                                  {"channels", fc.channels},
                                  {"samples", std::move(samples)},
                                  {"next", page->next ? TimeJson(*page->next) : json(nullptr)}});
  if (page->next) r.headers.emplace_back("Link", NextLink(fc, *page->next, *to, *limit, false));
  return r;
}

}  // namespace lyapcast::api
