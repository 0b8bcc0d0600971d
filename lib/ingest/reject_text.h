// Private to lib/ingest: quoting user text inside one-line reject messages.
#pragma once

#include <cstdio>
#include <string>
#include <string_view>

namespace lyapcast {

// `text` made safe for a one-line reply: at most `max` bytes (cut on a UTF-8
// boundary, then "..."), control bytes, DEL and backslashes escaped.
inline std::string Sanitize(std::string_view text, size_t max = 40) {
  bool truncated = false;
  if (text.size() > max) {
    size_t cut = max;
    while (cut > 0 && (static_cast<unsigned char>(text[cut]) & 0xC0) == 0x80) --cut;
    text = text.substr(0, cut);
    truncated = true;
  }
  std::string out;
  out.reserve(text.size() + 8);
  for (const char ch : text) {
    const auto b = static_cast<unsigned char>(ch);
    switch (ch) {
      case '\t': out += "\\t"; continue;
      case '\n': out += "\\n"; continue;
      case '\r': out += "\\r"; continue;
      case '\\': out += "\\\\"; continue;
      default: break;
    }
    if (b < 0x20 || b == 0x7F) {
      char buf[8];
      std::snprintf(buf, sizeof buf, "\\x%02x", b);
      out += buf;
    } else {
      out += ch;
    }
  }
  if (truncated) out += "...";
  return out;
}

// Sanitize(text) in single quotes: 'flw'.
inline std::string Quote(std::string_view text, size_t max = 40) { return "'" + Sanitize(text, max) + "'"; }

}  // namespace lyapcast
