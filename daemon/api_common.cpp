#include "api_common.h"

#include <fmt/format.h>

#include <charconv>
#include <cmath>

namespace lyapcast::api {

HttpResponse Json(int status, const json& body) {
  HttpResponse r;
  r.status = status;
  r.body = body.dump(-1, ' ', false, json::error_handler_t::replace);
  r.body += '\n';
  return r;
}

HttpResponse Error(int status, std::string_view code, std::string message) {
  return Json(status, json{{"error", {{"code", code}, {"message", std::move(message)}}}});
}

HttpResponse BadParameter(std::string_view name, std::string message) {
  return Error(400, "bad-parameter", fmt::format("{}: {}", name, message));
}

HttpResponse FromStatus(const Status& status) {
  switch (status.code()) {
    case StatusCode::kNotFound: return Error(404, "not-found", status.message());
    case StatusCode::kFailedPrecondition: return Error(409, "conflict", status.message());
    case StatusCode::kUnavailable:
    case StatusCode::kIoError: return Error(503, "unavailable", status.message());
    case StatusCode::kInvalidArgument: return Error(400, "bad-parameter", status.message());
    default: return Error(500, "internal", status.message());
  }
}

json TimeJson(DataTime t) { return json{{"epoch_s", ToEpochSeconds(t)}, {"rfc3339", FormatRfc3339(t)}}; }

std::string EpochText(DataTime t) {
  const std::int64_t us = EpochMicros(t);
  const bool negative = us < 0;
  const std::uint64_t a = negative ? static_cast<std::uint64_t>(-(us + 1)) + 1 : static_cast<std::uint64_t>(us);
  return fmt::format("{}{}.{:06}", negative ? "-" : "", a / 1'000'000, a % 1'000'000);
}

json OptionalNumber(const std::optional<double>& v) {
  return v && std::isfinite(*v) ? json(*v) : json(nullptr);
}

namespace {
const std::string* Find(const HttpRequest& req, const std::string& name) {
  const auto it = req.query.find(name);
  return it == req.query.end() ? nullptr : &it->second;
}
}  // namespace

Result<std::optional<DataTime>> TimeParam(const HttpRequest& req, const std::string& name) {
  const std::string* text = Find(req, name);
  if (text == nullptr) return std::optional<DataTime>{};
  double seconds = 0;
  const char* end = text->data() + text->size();
  const auto [ptr, ec] = std::from_chars(text->data(), end, seconds);
  if (ec == std::errc() && ptr == end) {
    auto t = DataTimeFromEpochSeconds(seconds);
    if (!t.ok()) return Status::Invalid(fmt::format("{}: {}", name, t.status().message()));
    return std::optional<DataTime>(*t);
  }
  auto t = ParseRfc3339(*text);
  if (!t.ok()) {
    return Status::Invalid(fmt::format("{}: expected epoch seconds or an RFC 3339 time, got '{}'", name, *text));
  }
  return std::optional<DataTime>(*t);
}

Result<std::optional<std::int64_t>> IntParam(const HttpRequest& req, const std::string& name, std::int64_t min,
                                             std::int64_t max) {
  const std::string* text = Find(req, name);
  if (text == nullptr) return std::optional<std::int64_t>{};
  std::int64_t v = 0;
  const char* end = text->data() + text->size();
  const auto [ptr, ec] = std::from_chars(text->data(), end, v);
  if (ec != std::errc() || ptr != end || v < min || v > max) {
    return Status::Invalid(fmt::format("{}: expected an integer from {} to {}, got '{}'", name, min, max, *text));
  }
  return std::optional<std::int64_t>(v);
}

Result<std::optional<Micros>> DurationParam(const HttpRequest& req, const std::string& name) {
  const std::string* text = Find(req, name);
  if (text == nullptr) return std::optional<Micros>{};
  auto d = ParseDuration(*text);
  if (!d.ok() || *d <= Micros{}) {
    return Status::Invalid(fmt::format("{}: expected a positive duration such as 30s, 5m or 250ms, got '{}'", name,
                                       *text));
  }
  return std::optional<Micros>(*d);
}

Result<std::optional<bool>> BoolParam(const HttpRequest& req, const std::string& name) {
  const std::string* text = Find(req, name);
  if (text == nullptr) return std::optional<bool>{};
  if (*text == "true" || *text == "1") return std::optional<bool>(true);
  if (*text == "false" || *text == "0") return std::optional<bool>(false);
  return Status::Invalid(fmt::format("{}: expected true or false, got '{}'", name, *text));
}

Result<std::optional<std::string_view>> WordParam(const HttpRequest& req, const std::string& name,
                                                  std::initializer_list<std::string_view> allowed) {
  const std::string* text = Find(req, name);
  if (text == nullptr) return std::optional<std::string_view>{};
  std::string words;
  for (std::string_view word : allowed) {
    if (*text == word) return std::optional<std::string_view>(word);
    words += words.empty() ? "" : " or ";
    words += word;
  }
  return Status::Invalid(fmt::format("{}: expected {}, got '{}'", name, words, *text));
}

Result<bool> WantsCsv(const HttpRequest& req) {
  const std::string* format = Find(req, "format");
  if (format == nullptr) return req.accept.find("text/csv") != std::string::npos;
  if (*format == "csv") return true;
  if (*format == "json") return false;
  return Status::Invalid(fmt::format("format: expected csv or json, got '{}'", *format));
}

}  // namespace lyapcast::api
