// Token handling shared by the ingest and HTTP front ends.
#pragma once

#include <filesystem>
#include <string>
#include <string_view>

#include "core/status.h"

namespace lyapcast {

// Compares in time that depends only on the lengths, not on where the
// strings first differ, so a token cannot be guessed byte by byte.
bool ConstantTimeEquals(std::string_view a, std::string_view b);

// Reads a token file: the first line, surrounding white space removed.
// Errors: the file is unreadable or the token is empty or has inner blanks.
// The token itself never appears in a message.
[[nodiscard]] Result<std::string> ReadTokenFile(const std::filesystem::path& file);

}  // namespace lyapcast
