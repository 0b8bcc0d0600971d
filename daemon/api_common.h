// Pieces every route uses: JSON and error responses, time values, and
// query-parameter parsing that names the bad parameter.
#pragma once

#include <nlohmann/json.hpp>

#include <cstdint>
#include <initializer_list>
#include <optional>
#include <string>
#include <string_view>

#include "core/data_time.h"
#include "core/status.h"
#include "http_types.h"

namespace lyapcast::api {

using nlohmann::json;

inline constexpr const char* kAdvisory =
    "Forecasts are advisory. The site's safety systems, interlocks, local codes and licensed engineering "
    "practice always govern the operation of plant.";

HttpResponse Json(int status, const json& body);
HttpResponse Error(int status, std::string_view code, std::string message);
// 400 bad-parameter naming the parameter.
HttpResponse BadParameter(std::string_view name, std::string message);
// Maps a Status from lower layers: kNotFound -> 404, kFailedPrecondition ->
// 409, kUnavailable/kIoError -> 503, kInvalidArgument -> 400, else 500.
HttpResponse FromStatus(const Status& status);

json TimeJson(DataTime t);
// Exact epoch seconds with 6 decimals ("1767225600.250000"), negative-safe.
std::string EpochText(DataTime t);
json OptionalNumber(const std::optional<double>& v);  // null when absent or not finite

// Query parameters: nullopt when absent; kInvalidArgument naming the
// parameter when malformed (answer with FromStatus -> 400).
// A data time given as epoch seconds or RFC 3339.
[[nodiscard]] Result<std::optional<DataTime>> TimeParam(const HttpRequest& req, const std::string& name);
[[nodiscard]] Result<std::optional<std::int64_t>> IntParam(const HttpRequest& req, const std::string& name,
                                                           std::int64_t min, std::int64_t max);
[[nodiscard]] Result<std::optional<Micros>> DurationParam(const HttpRequest& req, const std::string& name);
// true, false, 1 or 0.
[[nodiscard]] Result<std::optional<bool>> BoolParam(const HttpRequest& req, const std::string& name);
// One of the `allowed` words (the returned view is the matching element of
// `allowed`, so it lives as long as the words do: pass literals).
[[nodiscard]] Result<std::optional<std::string_view>> WordParam(const HttpRequest& req, const std::string& name,
                                                                std::initializer_list<std::string_view> allowed);

// True when the client asked for CSV: format=csv, or no format parameter
// and an Accept naming text/csv (format=json asks for JSON whatever Accept
// says); kInvalidArgument naming `format` for any other format value.
[[nodiscard]] Result<bool> WantsCsv(const HttpRequest& req);

}  // namespace lyapcast::api
