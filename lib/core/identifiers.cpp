#include "core/identifiers.h"

namespace lyapcast {

bool IsValidFeedId(std::string_view id) {
  if (id.empty() || id.size() > 64) return false;
  const auto lower_or_digit = [](char c) { return (c >= 'a' && c <= 'z') || (c >= '0' && c <= '9'); };
  if (!lower_or_digit(id.front())) return false;
  for (const char c : id.substr(1)) {
    if (!lower_or_digit(c) && c != '_' && c != '-') return false;
  }
  return true;
}

bool IsValidChannelName(std::string_view name) {
  if (name.empty() || name.size() > 64 || name == "t") return false;
  const auto alpha = [](char c) { return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || c == '_'; };
  if (!alpha(name.front())) return false;
  for (const char c : name.substr(1)) {
    if (!alpha(c) && !(c >= '0' && c <= '9')) return false;
  }
  return true;
}

}  // namespace lyapcast
