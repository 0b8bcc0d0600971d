// The operator page (docs/http-api.md "Operator page"): static files compiled into the
// binary from daemon/page/ and served without a token (they hold no data; the
// page reads everything through the API with the operator's token).
#pragma once

#include <optional>

#include "http_types.h"

namespace lyapcast {

// Answers GET and HEAD of "/" (index.html), "/page/app.js" and
// "/page/style.css" with their content type, Cache-Control: no-cache and a
// Content-Security-Policy allowing scripts and styles from the daemon itself
// only (no inline script); 405 for other methods on those paths. Returns
// nullopt for every other path, which the API then routes. Thread-safe (reads
// constant data only).
std::optional<HttpResponse> ServePage(const HttpRequest& req);

}  // namespace lyapcast
