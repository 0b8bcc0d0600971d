// Identifier grammars (docs/design.md "Identifiers and paths"): feed ids and
// channel names, checked by the config parser, the model file loader and the
// tools alike. Pure functions; thread-safe.
#pragma once

#include <string_view>

namespace lyapcast {

// [a-z0-9][a-z0-9_-]{0,63}
bool IsValidFeedId(std::string_view id);
// [A-Za-z_][A-Za-z0-9_]{0,63}, not "t" (the time variable of expressions)
bool IsValidChannelName(std::string_view name);

}  // namespace lyapcast
