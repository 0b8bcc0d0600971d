// The per-feed routes, one function each; api.cpp dispatches to them after
// checking access and the method. `feed` is a valid feed index.
#pragma once

#include <cstdint>
#include <string>

#include "api.h"
#include "http_types.h"

namespace lyapcast::api {

HttpResponse Forecast(const ApiContext& c, std::uint32_t feed, const HttpRequest& req);
HttpResponse Status(const ApiContext& c, std::uint32_t feed);
HttpResponse Models(const ApiContext& c, std::uint32_t feed, const HttpRequest& req);
HttpResponse ModelFile(const ApiContext& c, std::uint32_t feed, const std::string& version);
HttpResponse Activate(const ApiContext& c, std::uint32_t feed, const std::string& version);
HttpResponse Upload(const ApiContext& c, std::uint32_t feed, const HttpRequest& req);
HttpResponse Retrain(const ApiContext& c, std::uint32_t feed);
HttpResponse Job(const ApiContext& c, std::uint32_t feed, const std::string& job);
HttpResponse Pause(const ApiContext& c, std::uint32_t feed, bool paused);
HttpResponse Samples(const ApiContext& c, std::uint32_t feed, const HttpRequest& req);
HttpResponse Health(const ApiContext& c);
HttpResponse Metrics(const ApiContext& c);

}  // namespace lyapcast::api
