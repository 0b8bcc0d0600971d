// GET /v1/feeds/{id}/samples: a page of stored samples, as JSON or as
// ingest-format CSV so an export can be replayed. Suspect readings
// (docs/design.md "Sensor screen") are never given as values: JSON has null
// there and the raw reading beside it; CSV writes the raw reading as
// received by default, so an import into another daemon screens it again.
#include <fmt/format.h>

#include <cmath>
#include <limits>
#include <optional>
#include <string_view>

#include "api_common.h"
#include "api_routes.h"
#include "api_store.h"

namespace lyapcast::api {
namespace {

// `Link: <...>; rel="next"` (RFC 8288) to the next page: the same request
// from `next` on. Every value is an epoch number, an integer or a format
// word, so nothing needs percent-encoding.
std::string NextLink(const FeedConfig& fc, DataTime next, std::optional<DataTime> to, std::optional<std::int64_t> limit,
                     bool csv, std::optional<std::string_view> suspect) {
  std::string target = fmt::format("/v1/feeds/{}/samples?from={}", fc.id, EpochText(next));
  if (to) target += "&to=" + EpochText(*to);
  if (limit) target += fmt::format("&limit={}", *limit);
  target += csv ? "&format=csv" : "&format=json";
  if (suspect) target += fmt::format("&suspect={}", *suspect);
  return fmt::format("<{}>; rel=\"next\"", target);
}

// A raw reading as JSON: a number, or "inf", "-inf", "nan" where JSON has
// none (ingest refuses non-finite values, so only a file written otherwise
// could hold one).
json RawJson(double v) { return std::isfinite(v) ? json(v) : json(fmt::format("{}", v)); }

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
  const auto suspect = WordParam(req, "suspect", {"raw", "omit"});
  if (!suspect.ok()) return FromStatus(suspect.status());
  const bool raw = suspect->value_or("raw") == "raw";
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
        const int c = static_cast<int>(ch);
        // A non-finite raw reading is left empty: ingest could not take it back.
        const bool write = !s.missing(c) || (raw && s.suspect(c) && std::isfinite(s.values[ch]));
        r.body += write ? fmt::format(",{:.17g}", s.values[ch]) : ",";
      }
      r.body += '\n';
    }
    if (page->next) r.headers.emplace_back("Link", NextLink(fc, *page->next, *to, *limit, true, *suspect));
    return r;
  }
  json samples = json::array();
  for (const Sample& s : page->samples) {
    json values = json::array();
    json suspects = json::object();
    for (std::size_t ch = 0; ch < s.values.size(); ++ch) {
      const int c = static_cast<int>(ch);
      values.push_back(s.missing(c) ? json(nullptr) : json(s.values[ch]));
      if (raw && s.suspect(c)) suspects[fc.channels[ch]] = RawJson(s.values[ch]);
    }
    json sample = {{"t", TimeJson(s.t)}, {"values", std::move(values)}};
    if (!suspects.empty()) sample["suspect"] = std::move(suspects);
    samples.push_back(std::move(sample));
  }
  HttpResponse r = Json(200, json{{"feed", fc.id},
                                  {"channels", fc.channels},
                                  {"samples", std::move(samples)},
                                  {"next", page->next ? TimeJson(*page->next) : json(nullptr)}});
  if (page->next) r.headers.emplace_back("Link", NextLink(fc, *page->next, *to, *limit, false, *suspect));
  return r;
}

}  // namespace lyapcast::api
