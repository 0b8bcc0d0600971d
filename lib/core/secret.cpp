#include "core/secret.h"

#include <fstream>

namespace lyapcast {

bool ConstantTimeEquals(std::string_view a, std::string_view b) {
  // Walk the longer length so the time does not reveal a prefix match.
  const std::size_t n = a.size() > b.size() ? a.size() : b.size();
  unsigned char diff = a.size() == b.size() ? 0 : 1;
  for (std::size_t i = 0; i < n; ++i) {
    const unsigned char x = i < a.size() ? static_cast<unsigned char>(a[i]) : 0;
    const unsigned char y = i < b.size() ? static_cast<unsigned char>(b[i]) : 0;
    diff |= static_cast<unsigned char>(x ^ y);
  }
  return diff == 0;
}

Result<std::string> ReadTokenFile(const std::filesystem::path& file) {
  std::ifstream in(file);
  if (!in) return Status::Io("cannot read token file " + file.string());
  std::string line;
  std::getline(in, line);
  const auto first = line.find_first_not_of(" \t\r");
  const auto last = line.find_last_not_of(" \t\r");
  if (first == std::string::npos) return Status::Invalid("token file " + file.string() + " is empty");
  std::string token = line.substr(first, last - first + 1);
  if (token.find_first_of(" \t") != std::string::npos) {
    return Status::Invalid("token file " + file.string() + " holds a token with blanks inside; use one word");
  }
  return token;
}

}  // namespace lyapcast
