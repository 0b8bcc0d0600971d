#include "learn/model_file.h"

#include <fcntl.h>
#include <fmt/format.h>
#include <sys/stat.h>
#include <unistd.h>

#include <atomic>
#include <bit>
#include <cerrno>
#include <cmath>
#include <cstring>
#include <set>

#include "core/identifiers.h"

namespace lyapcast {

namespace {

constexpr std::uint8_t kActivationTanh = 0;
constexpr std::uint8_t kActivationSilu = 1;
constexpr std::uint8_t kFamilyNeural = 0;      // format version 3 family codes
constexpr std::uint8_t kFamilyPolynomial = 1;

using PolynomialPtr = std::shared_ptr<const PolynomialMap>;

// ---- writing ---------------------------------------------------------------

void PutU8(std::string* out, std::uint8_t v) { out->push_back(static_cast<char>(v)); }

void PutU32(std::string* out, std::uint32_t v) {
  for (int i = 0; i < 4; ++i) out->push_back(static_cast<char>((v >> (8 * i)) & 0xff));
}

void PutU64(std::string* out, std::uint64_t v) {
  for (int i = 0; i < 8; ++i) out->push_back(static_cast<char>((v >> (8 * i)) & 0xff));
}

void PutStr(std::string* out, std::string_view s) {
  PutU32(out, static_cast<std::uint32_t>(s.size()));
  out->append(s);
}

template <typename T>
void PutValues(std::string* out, const T* values, Eigen::Index n) {
  for (Eigen::Index i = 0; i < n; ++i) {
    if constexpr (sizeof(T) == 4) {
      PutU32(out, std::bit_cast<std::uint32_t>(values[i]));
    } else {
      PutU64(out, std::bit_cast<std::uint64_t>(values[i]));
    }
  }
}

template <typename V>
bool AllFinite(const V& v) {
  return v.array().isFinite().all();
}

template <typename T>
Status CheckModel(const FlowMap<T>& map) {
  if (map.empty()) return Status::Invalid("the model is empty (no network)");
  if (!AllFinite(map.parameters())) return Status::Invalid("the model has non-finite weights or mu");
  return Status::Ok();
}

Status CheckModel(const PolynomialPtr& map) {
  if (map == nullptr) return Status::Invalid("the model is empty (no polynomial map)");
  return Status::Ok();  // PolynomialMap::Create checked its values
}

template <typename T>
int ChannelsOf(const FlowMap<T>& map) {
  return map.empty() ? 0 : map.channels();
}
int ChannelsOf(const PolynomialPtr& map) { return map == nullptr ? 0 : map->shape().channels; }

template <typename T>
double DtOf(const FlowMap<T>& map) {
  return map.empty() ? 0.0 : map.dt();
}
double DtOf(const PolynomialPtr& map) { return map == nullptr ? 0.0 : map->shape().dt; }

void PutStepAndUnit(std::string* out, const ModelFileContents& contents) {
  PutU64(out, static_cast<std::uint64_t>(contents.step_micros.count()));
  PutU64(out, static_cast<std::uint64_t>(contents.time_unit_micros.count()));
}

// Version 3, family 1: everything up to the metadata.
void PutPolynomial(std::string* out, const PolynomialMap& map, const ModelFileContents& contents) {
  PutU8(out, kFamilyPolynomial);
  PutU32(out, static_cast<std::uint32_t>(contents.channels.size()));
  for (const std::string& name : contents.channels) PutStr(out, name);
  PutU32(out, static_cast<std::uint32_t>(map.features().degree()));
  PutU64(out, std::bit_cast<std::uint64_t>(map.shape().dt));
  PutStepAndUnit(out, contents);
  const Eigen::Index c = map.shape().channels;
  PutValues(out, map.mean().data(), c);
  PutValues(out, map.stddev().data(), c);
  PutValues(out, map.increment_scale().data(), c);
  PutU64(out, static_cast<std::uint64_t>(map.readout().size()));
  PutValues(out, map.readout().data(), map.readout().size());
}


template <typename T>
void PutModel(std::string* out, const FlowMap<T>& map, const std::vector<std::string>& channels) {
  PutU8(out, sizeof(T));
  PutU8(out, map.activation() == Activation::kTanh ? kActivationTanh : kActivationSilu);
  PutU32(out, static_cast<std::uint32_t>(channels.size()));
  for (const std::string& name : channels) PutStr(out, name);
  const std::vector<int> hidden = map.hidden();
  PutU32(out, static_cast<std::uint32_t>(hidden.size()));
  for (const int w : hidden) PutU32(out, static_cast<std::uint32_t>(w));
  PutU64(out, std::bit_cast<std::uint64_t>(map.dt()));
}

template <typename T>
void PutValuesOf(std::string* out, const FlowMap<T>& map) {
  const Eigen::Index c = map.channels();
  PutValues(out, map.mean().data(), c);
  PutValues(out, map.stddev().data(), c);
  PutValues(out, map.increment_scale().data(), c);
  PutValues(out, map.mu().data(), c);
  const Eigen::Index p = map.layout().network_size;
  PutU64(out, static_cast<std::uint64_t>(p));
  PutValues(out, map.parameters().data(), p);
}

// The body up to the metadata, by family.
template <typename T>
void PutBody(std::string* out, const FlowMap<T>& map, const ModelFileContents& contents) {
  PutModel(out, map, contents.channels);
  PutStepAndUnit(out, contents);
  PutValuesOf(out, map);
}
void PutBody(std::string* out, const PolynomialPtr& map, const ModelFileContents& contents) {
  PutPolynomial(out, *map, contents);
}

// ---- reading ---------------------------------------------------------------

// Bounds-checked little-endian reader over the body. The first failure is
// kept in `error`; later reads fail too, so callers check once per block.
class Reader {
 public:
  Reader(std::string_view bytes, size_t base) : bytes_(bytes), base_(base) {}

  size_t remaining() const { return bytes_.size() - pos_; }
  size_t offset() const { return base_ + pos_; }  // file offset, for messages
  bool ok() const { return error_.ok(); }
  Status error() const { return error_; }

  bool Need(size_t n, std::string_view what) {
    if (!ok()) return false;
    if (n > remaining()) {
      error_ = Status::Corruption(fmt::format("{} at byte {} needs {} bytes but only {} remain in the body", what,
                                              offset(), n, remaining()));
      return false;
    }
    return true;
  }
  void Fail(std::string message) {
    if (ok()) error_ = Status::Corruption(std::move(message));
  }

  std::uint64_t UInt(size_t width, std::string_view what) {
    if (!Need(width, what)) return 0;
    std::uint64_t v = 0;
    for (size_t i = 0; i < width; ++i) v |= std::uint64_t{static_cast<unsigned char>(bytes_[pos_ + i])} << (8 * i);
    pos_ += width;
    return v;
  }
  std::uint8_t U8(std::string_view what) { return static_cast<std::uint8_t>(UInt(1, what)); }
  std::uint32_t U32(std::string_view what) { return static_cast<std::uint32_t>(UInt(4, what)); }
  std::uint64_t U64(std::string_view what) { return UInt(8, what); }

  std::string Str(std::string_view what) {
    const std::uint32_t n = U32(what);
    if (!Need(n, what)) return {};
    std::string s(bytes_.substr(pos_, n));
    pos_ += n;
    return s;
  }

  // A count of items each at least `min_item_bytes` long: rejected before
  // anything is allocated if the remaining bytes cannot hold them.
  std::uint64_t Count(size_t width, size_t min_item_bytes, std::string_view what) {
    const std::uint64_t n = UInt(width, what);
    if (ok() && n > remaining() / min_item_bytes) {
      Fail(fmt::format("{} is {} at byte {}, but only {} bytes remain", what, n, offset() - width, remaining()));
      return 0;
    }
    return n;
  }

  template <typename T>
  void Values(T* out, Eigen::Index n, std::string_view what) {
    if (!Need(static_cast<size_t>(n) * sizeof(T), what)) return;
    for (Eigen::Index i = 0; i < n; ++i) {
      if constexpr (sizeof(T) == 4) {
        out[i] = std::bit_cast<T>(static_cast<std::uint32_t>(UInt(4, what)));
      } else {
        out[i] = std::bit_cast<T>(UInt(8, what));
      }
    }
  }

 private:
  std::string_view bytes_;
  size_t base_;
  size_t pos_ = 0;
  Status error_;
};

struct Architecture {
  int scalar_bytes = 0;
  Activation activation = Activation::kTanh;
  std::vector<std::string> channels;
  std::vector<int> hidden;
  double dt = 0;
};

Status ReadChannelNames(Reader* r, std::uint64_t max_channels, std::vector<std::string>* out) {
  const std::uint64_t c = r->Count(4, 4, "channel count");
  if (!r->ok()) return r->error();
  if (c < 1 || c > max_channels) {
    return Status::Corruption(fmt::format("channel count {} is outside [1, {}]", c, max_channels));
  }
  std::set<std::string> seen;
  for (std::uint64_t i = 0; i < c; ++i) {
    std::string name = r->Str(fmt::format("name of channel {}", i));
    if (!r->ok()) return r->error();
    if (!IsValidChannelName(name)) {
      return Status::Corruption(fmt::format("channel {} has an invalid name ({} bytes)", i, name.size()));
    }
    if (!seen.insert(name).second) return Status::Corruption(fmt::format("channel name '{}' repeats", name));
    out->push_back(std::move(name));
  }
  return Status::Ok();
}

Status ReadArchitecture(Reader* r, Architecture* a) {
  const std::uint8_t scalar = r->U8("scalar type");
  const std::uint8_t activation = r->U8("activation");
  if (!r->ok()) return r->error();
  if (scalar != 4 && scalar != 8) {
    return Status::Corruption(fmt::format("scalar type {} is neither 4 (float32) nor 8 (float64)", scalar));
  }
  if (activation != kActivationTanh && activation != kActivationSilu) {
    return Status::Corruption(fmt::format("activation code {} is neither 0 (tanh) nor 1 (silu)", activation));
  }
  a->scalar_bytes = scalar;
  a->activation = activation == kActivationTanh ? Activation::kTanh : Activation::kSilu;
  if (Status st = ReadChannelNames(r, static_cast<std::uint64_t>(kMaxMlpWidth), &a->channels); !st.ok()) return st;
  const std::uint64_t h = r->Count(4, 4, "hidden layer count");
  if (!r->ok()) return r->error();
  if (h + 1 > static_cast<std::uint64_t>(kMaxMlpLayers)) {
    return Status::Corruption(fmt::format("hidden layer count {} exceeds {}", h, kMaxMlpLayers - 1));
  }
  for (std::uint64_t i = 0; i < h; ++i) {
    const std::uint32_t w = r->U32("hidden width");
    if (!r->ok()) return r->error();
    if (w < 1 || w > static_cast<std::uint32_t>(kMaxMlpWidth)) {
      return Status::Corruption(fmt::format("hidden layer {} has width {}; widths must be in [1, {}]", i, w,
                                            kMaxMlpWidth));
    }
    a->hidden.push_back(static_cast<int>(w));
  }
  a->dt = std::bit_cast<double>(r->U64("dt"));
  return r->error();
}

// Sets *problem to kNonFinite for non-finite values (otherwise the caller's
// kMalformed applies).
template <typename T>
Status ReadModel(Reader* r, const Architecture& a, FlowMap<T>* out, ModelFileProblem* problem) {
  const int c = static_cast<int>(a.channels.size());
  Result<FlowMap<T>> created = FlowMap<T>::Create(c, a.hidden, a.activation, a.dt);
  if (!created.ok()) return Status::Corruption("inconsistent architecture: " + created.status().message());
  FlowMap<T>& map = created.value();
  using Vec = typename FlowMap<T>::Vec;
  Vec m(c), s(c), S(c), mu(c);
  r->Values(m.data(), c, "channel means");
  r->Values(s.data(), c, "channel stds");
  r->Values(S.data(), c, "increment scales");
  r->Values(mu.data(), c, "mu");
  if (!r->ok()) return r->error();
  map.mu() = mu;
  const std::pair<const Vec*, const char*> stats[] = {{&m, "channel mean"}, {&s, "channel std"},
                                                      {&S, "increment scale"}, {&mu, "mu"}};
  for (const auto& [values, what] : stats) {
    for (int i = 0; i < c; ++i) {
      if (!std::isfinite((*values)[i])) {
        *problem = ModelFileProblem::kNonFinite;
        return Status::Corruption(fmt::format("non-finite {} of channel {} ('{}')", what, i, a.channels[i]));
      }
    }
  }
  if (Status st = map.SetNormalization(m, s, S); !st.ok()) return Status::Corruption(st.message());
  const std::uint64_t p = r->U64("network value count");
  const auto expected = static_cast<std::uint64_t>(map.layout().network_size);
  if (r->ok() && p != expected) {
    return Status::Corruption(
        fmt::format("network value count {} does not match the architecture, which needs {}", p, expected));
  }
  r->Values(map.parameters().data(), map.layout().network_size, "network weights");
  if (!r->ok()) return r->error();
  if (!AllFinite(map.parameters())) {
    *problem = ModelFileProblem::kNonFinite;
    return Status::Corruption("non-finite network weight or mu");
  }
  *out = std::move(map);
  return Status::Ok();
}

Status CheckContents(const ModelFileContents& contents) {
  const int c = std::visit([](const auto& map) { return ChannelsOf(map); }, contents.model);
  if (c == 0) return Status::Invalid("the model is empty (no network)");
  if (static_cast<int>(contents.channels.size()) != c) {
    return Status::Invalid(fmt::format("{} channel names for a model with {} channels", contents.channels.size(), c));
  }
  std::set<std::string_view> names;
  for (const std::string& name : contents.channels) {
    if (!IsValidChannelName(name)) return Status::Invalid(fmt::format("invalid channel name '{}'", name));
    if (!names.insert(name).second) return Status::Invalid(fmt::format("channel name '{}' repeats", name));
  }
  if (contents.step_micros <= Micros{} || contents.time_unit_micros <= Micros{}) {
    return Status::Invalid(fmt::format("step ({} us) and time unit ({} us) must be > 0", contents.step_micros.count(),
                                       contents.time_unit_micros.count()));
  }
  std::set<std::string_view> keys;
  for (const auto& [key, value] : contents.metadata) {
    if (key.empty()) return Status::Invalid("a metadata key is empty");
    if (!keys.insert(key).second) return Status::Invalid(fmt::format("metadata key '{}' repeats", key));
    if (key.size() > UINT32_MAX || value.size() > UINT32_MAX) {
      return Status::Invalid(fmt::format("metadata '{}' is too long", key));
    }
  }
  if (!contents.roles.empty() && contents.roles != AllStateRoles(c)) {
    // Every family stored today predicts all its channels.
    return Status::Invalid(fmt::format("{} channel roles for {} channels; a flow map's channels are all 'state'",
                                       contents.roles.size(), c));
  }
  return std::visit([](const auto& map) { return CheckModel(map); }, contents.model);
}

// Metadata: count, then (key, value) pairs; keys non-empty and unique.
Status ReadMetadata(Reader* r, std::vector<std::pair<std::string, std::string>>* out) {
  const std::uint64_t k = r->Count(4, 8, "metadata count");
  std::set<std::string> keys;
  for (std::uint64_t i = 0; i < k && r->ok(); ++i) {
    std::string key = r->Str("metadata key");
    std::string value = r->Str("metadata value");
    if (!r->ok()) break;
    if (key.empty()) return Status::Corruption(fmt::format("metadata entry {} has an empty key", i));
    if (!keys.insert(key).second) return Status::Corruption(fmt::format("metadata key '{}' repeats", key));
    out->emplace_back(std::move(key), std::move(value));
  }
  return r->error();
}

// Channel roles (format version 2): count == channels, then one code each.
// Only the state role exists, and a flow map's channels are all state.
Status ReadRoles(Reader* r, std::size_t channels, std::vector<ChannelRole>* out, ModelFileProblem* problem) {
  const std::uint64_t n = r->Count(4, 1, "role count");
  if (!r->ok()) return r->error();
  if (n != channels) return Status::Corruption(fmt::format("{} channel roles for {} channels", n, channels));
  for (std::uint64_t i = 0; i < n; ++i) {
    const std::uint8_t code = r->U8("channel role");
    if (!r->ok()) return r->error();
    if (code != static_cast<std::uint8_t>(ChannelRole::kState)) {
      *problem = ModelFileProblem::kUnknownRole;
      return Status::Corruption(fmt::format("channel {} has role code {}; this build knows 0 (state)", i, code));
    }
    out->push_back(static_cast<ChannelRole>(code));
  }
  return Status::Ok();
}

Status ReadStepAndUnit(Reader* r, ModelFileContents* contents) {
  contents->step_micros = Micros(static_cast<std::int64_t>(r->U64("data step")));
  contents->time_unit_micros = Micros(static_cast<std::int64_t>(r->U64("time unit")));
  if (!r->ok()) return r->error();
  if (contents->step_micros <= Micros{} || contents->time_unit_micros <= Micros{}) {
    return Status::Corruption(fmt::format("data step ({} us) and time unit ({} us) must be > 0",
                                          contents->step_micros.count(), contents->time_unit_micros.count()));
  }
  return Status::Ok();
}

// Version 3, family 1, up to the metadata.
Status ReadPolynomial(Reader* r, ModelFileContents* contents, ModelFileProblem* problem) {
  if (Status st = ReadChannelNames(r, 64, &contents->channels); !st.ok()) return st;
  const int c = static_cast<int>(contents->channels.size());
  const std::uint32_t degree = r->U32("polynomial degree");
  const double dt = std::bit_cast<double>(r->U64("dt"));
  if (!r->ok()) return r->error();
  Result<PolynomialFeatures> features = PolynomialFeatures::Create(c, static_cast<int>(std::min(degree, 64U)));
  if (!features.ok()) return Status::Corruption("inconsistent polynomial map: " + features.status().message());
  if (Status st = ReadStepAndUnit(r, contents); !st.ok()) return st;
  Eigen::VectorXd m(c), s(c), S(c);
  r->Values(m.data(), c, "channel means");
  r->Values(s.data(), c, "channel stds");
  r->Values(S.data(), c, "increment scales");
  const std::uint64_t p = r->U64("readout value count");
  if (!r->ok()) return r->error();
  const auto expected = static_cast<std::uint64_t>(features.value().size()) * static_cast<std::uint64_t>(c);
  if (p != expected) {
    return Status::Corruption(fmt::format("readout value count {} does not match degree {} in {} channels, which "
                                          "needs {}",
                                          p, degree, c, expected));
  }
  Eigen::MatrixXd W(features.value().size(), c);
  r->Values(W.data(), W.size(), "readout");
  if (!r->ok()) return r->error();
  if (!m.allFinite() || !s.allFinite() || !S.allFinite() || !W.allFinite() || !std::isfinite(dt)) {
    *problem = ModelFileProblem::kNonFinite;
    return Status::Corruption("non-finite normalization, dt or readout value in a polynomial map");
  }
  auto map = PolynomialMap::Create(std::move(features).value(), dt, m, s, S, std::move(W));
  if (!map.ok()) return Status::Corruption("inconsistent polynomial map: " + map.status().message());
  contents->model = std::move(map).value();
  return Status::Ok();
}

std::string ErrnoText(int e) { return std::strerror(e); }

}  // namespace

std::uint64_t Fnv1a64(std::string_view bytes) {
  std::uint64_t h = 0xcbf29ce484222325ull;  // FNV-1a 64 offset basis
  for (const char ch : bytes) {
    h ^= static_cast<unsigned char>(ch);
    h *= 0x100000001b3ull;  // FNV 64 prime
  }
  return h;
}

Result<std::string> Serialize(const ModelFileContents& contents) {
  if (Status st = CheckContents(contents); !st.ok()) return st;
  std::string out(kModelFileMagic, sizeof kModelFileMagic);
  // A neural flow map is written as version 2, which older builds read.
  PutU32(&out, contents.is_neural() ? 2 : 3);
  PutU32(&out, kModelFileHeaderLength);
  PutU64(&out, 0);  // body length, patched below
  std::visit([&](const auto& map) { PutBody(&out, map, contents); }, contents.model);
  PutU32(&out, static_cast<std::uint32_t>(contents.metadata.size()));
  for (const auto& [key, value] : contents.metadata) {
    PutStr(&out, key);
    PutStr(&out, value);
  }
  const std::vector<ChannelRole> roles =
      contents.roles.empty() ? AllStateRoles(static_cast<int>(contents.channels.size())) : contents.roles;
  PutU32(&out, static_cast<std::uint32_t>(roles.size()));
  for (const ChannelRole role : roles) PutU8(&out, static_cast<std::uint8_t>(role));
  const std::uint64_t body = out.size() - kModelFileHeaderLength;
  for (int i = 0; i < 8; ++i) out[16 + static_cast<size_t>(i)] = static_cast<char>((body >> (8 * i)) & 0xff);
  PutU64(&out, Fnv1a64(out));
  return out;
}

const char* ModelFileProblemName(ModelFileProblem p) {
  switch (p) {
    case ModelFileProblem::kNone: return "none";
    case ModelFileProblem::kNotAModelFile: return "not-a-model-file";
    case ModelFileProblem::kFormatVersion: return "format-version";
    case ModelFileProblem::kTruncated: return "truncated";
    case ModelFileProblem::kChecksum: return "checksum";
    case ModelFileProblem::kUnknownRole: return "unknown-role";
    case ModelFileProblem::kNonFinite: return "non-finite";
    case ModelFileProblem::kMalformed: return "malformed";
  }
  return "?";
}

namespace {

// Deserialize; *problem is set where the kind is known and stays kMalformed
// otherwise.
Result<ModelFileContents> ParseModelFile(std::string_view bytes, ModelFileProblem* problem) {
  constexpr size_t kMagic = sizeof kModelFileMagic;
  const size_t prefix = std::min(bytes.size(), kMagic);
  if (prefix > 0 && std::memcmp(bytes.data(), kModelFileMagic, prefix) != 0) {
    *problem = ModelFileProblem::kNotAModelFile;
    return Status::Invalid("not a lyapcast model file: the first 8 bytes are not the magic \"LYAPMODL\"");
  }
  constexpr size_t kMin = kModelFileHeaderLength + 8;
  if (bytes.size() < kMin) {
    *problem = ModelFileProblem::kTruncated;
    return Status::Corruption(
        fmt::format("truncated model file: {} bytes, shorter than the {}-byte header and checksum", bytes.size(), kMin));
  }
  Reader header(bytes.substr(0, kModelFileHeaderLength), 0);
  header.UInt(kMagic, "magic");
  const std::uint32_t version = header.U32("format version");
  const std::uint32_t header_length = header.U32("header length");
  const std::uint64_t body_length = header.U64("body length");
  if (version > kModelFileVersion) {
    *problem = ModelFileProblem::kFormatVersion;
    return Status::Invalid(fmt::format("model file format version {} is newer than this build reads (up to {}); "
                                       "upgrade lyapcast",
                                       version, kModelFileVersion));
  }
  if (version == 0) {
    *problem = ModelFileProblem::kFormatVersion;
    return Status::Corruption("model file format version 0 does not exist");
  }
  if (header_length != kModelFileHeaderLength) {
    return Status::Corruption(fmt::format("header length {} is not {} (format versions 1 to 3)", header_length,
                                          kModelFileHeaderLength));
  }
  const std::uint64_t actual_body = bytes.size() - kMin;
  if (body_length > actual_body) {
    *problem = ModelFileProblem::kTruncated;
    return Status::Corruption(fmt::format("truncated model file: the header announces a {}-byte body but {} bytes "
                                          "follow the header (checksum included)",
                                          body_length, actual_body + 8));
  }
  if (body_length < actual_body) {
    return Status::Corruption(fmt::format("model file has {} unexpected bytes after the checksum",
                                          actual_body - body_length));
  }
  const size_t end = kModelFileHeaderLength + body_length;
  const std::uint64_t stored = Reader(bytes.substr(end), end).U64("checksum");
  const std::uint64_t computed = Fnv1a64(bytes.substr(0, end));
  if (stored != computed) {
    *problem = ModelFileProblem::kChecksum;
    return Status::Corruption(
        fmt::format("model file checksum mismatch (stored {:016x}, computed {:016x}): the file is damaged", stored,
                    computed));
  }

  Reader r(bytes.substr(kModelFileHeaderLength, body_length), kModelFileHeaderLength);
  std::uint8_t family = kFamilyNeural;
  if (version >= 3) {
    family = r.U8("model family");
    if (!r.ok()) return r.error();
    if (family != kFamilyNeural && family != kFamilyPolynomial) {
      return Status::Corruption(fmt::format("model family code {} is unknown (0 neural flow map, 1 polynomial map)",
                                            family));
    }
  }
  ModelFileContents contents;
  if (family == kFamilyPolynomial) {
    if (Status st = ReadPolynomial(&r, &contents, problem); !st.ok()) return st;
  } else {
    Architecture arch;
    if (Status st = ReadArchitecture(&r, &arch); !st.ok()) return st;
    if (Status st = ReadStepAndUnit(&r, &contents); !st.ok()) return st;
    Status st;
    if (arch.scalar_bytes == 4) {
      FlowMap<float> map;
      st = ReadModel(&r, arch, &map, problem);
      contents.model = std::move(map);
    } else {
      FlowMap<double> map;
      st = ReadModel(&r, arch, &map, problem);
      contents.model = std::move(map);
    }
    if (!st.ok()) return st;
    contents.channels = std::move(arch.channels);
  }
  if (Status meta = ReadMetadata(&r, &contents.metadata); !meta.ok()) return meta;
  // Version 1 ends at the metadata: its channels are all state.
  const Status roles =
      version >= 2 ? ReadRoles(&r, contents.channels.size(), &contents.roles, problem) : Status::Ok();
  if (!roles.ok()) return roles;
  if (version < 2) contents.roles = AllStateRoles(static_cast<int>(contents.channels.size()));
  if (r.remaining() != 0) {
    return Status::Corruption(fmt::format("{} unexpected bytes at the end of the body (byte {})", r.remaining(),
                                          r.offset()));
  }
  return contents;
}

}  // namespace

Result<ModelFileContents> Deserialize(std::string_view bytes, ModelFileProblem* problem) {
  ModelFileProblem kind = ModelFileProblem::kMalformed;
  Result<ModelFileContents> contents = ParseModelFile(bytes, &kind);
  if (problem != nullptr) *problem = contents.ok() ? ModelFileProblem::kNone : kind;
  return contents;
}

Result<std::shared_ptr<const ForecastModel>> MakeForecastModel(const ModelFileContents& contents,
                                                               ModelScalar scalar) {
  std::vector<ChannelRole> roles = contents.roles;
  if (roles.empty()) roles = AllStateRoles(static_cast<int>(contents.channels.size()));
  auto wrap = [&](auto map) -> Result<std::shared_ptr<const ForecastModel>> {
    using Map = decltype(map);
    auto made = NeuralFlowMap<typename Map::Mat::Scalar>::Create(std::move(map), std::move(roles));
    if (!made.ok()) return made.status();
    return std::shared_ptr<const ForecastModel>(std::move(made).value());
  };
  if (const auto* p = std::get_if<PolynomialPtr>(&contents.model)) {
    if (*p == nullptr) return Status::Invalid("the model is empty (no polynomial map)");
    if (roles != AllStateRoles(static_cast<int>(contents.channels.size()))) {
      return Status::Invalid("a polynomial map's channels are all 'state'");
    }
    return std::shared_ptr<const ForecastModel>(*p);
  }
  if (const auto* f = std::get_if<FlowMap<float>>(&contents.model)) return wrap(*f);
  const auto& d = std::get<FlowMap<double>>(contents.model);
  return scalar == ModelScalar::kFloat32 ? wrap(d.Cast<float>()) : wrap(d);
}

double ModelFileContents::dt() const {
  return std::visit([](const auto& map) { return DtOf(map); }, model);
}

Status SetFileModel(const std::shared_ptr<const ForecastModel>& model, ModelFileContents* contents) {
  if (model == nullptr) return Status::Invalid("no model to store");
  if (const FlowMap<float>* f = NeuralNetworkOf<float>(*model)) {
    contents->model = *f;
  } else if (const FlowMap<double>* d = NeuralNetworkOf<double>(*model)) {
    contents->model = *d;
  } else if (auto p = std::dynamic_pointer_cast<const PolynomialMap>(model)) {
    contents->model = std::move(p);
  } else {
    return Status::Invalid(fmt::format("model family '{}' cannot be stored in a model file", model->family()));
  }
  contents->roles = model->shape().roles;
  return Status::Ok();
}

Status SaveModel(const std::filesystem::path& path, const ModelFileContents& contents) {
  Result<std::string> bytes = Serialize(contents);
  if (!bytes.ok()) return Status(bytes.status().code(), path.string() + ": " + bytes.status().message());
  static std::atomic<unsigned> counter{0};
  std::filesystem::path tmp = path;
  tmp += fmt::format(".tmp-{}-{}", ::getpid(), counter++);
  const int fd = ::open(tmp.c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0644);
  if (fd < 0) return Status::Io(fmt::format("{}: cannot create: {}", tmp.string(), ErrnoText(errno)));
  auto fail = [&](const char* what, int e) {
    ::close(fd);
    ::unlink(tmp.c_str());
    return Status::Io(fmt::format("{}: {}: {}", tmp.string(), what, ErrnoText(e)));
  };
  const std::string& data = bytes.value();
  size_t done = 0;
  while (done < data.size()) {
    const ssize_t n = ::write(fd, data.data() + done, data.size() - done);
    if (n < 0) {
      if (errno == EINTR) continue;
      return fail("write failed", errno);
    }
    done += static_cast<size_t>(n);
  }
  if (::fsync(fd) != 0) return fail("fsync failed", errno);
  if (::close(fd) != 0) {
    const int e = errno;
    ::unlink(tmp.c_str());
    return Status::Io(fmt::format("{}: close failed: {}", tmp.string(), ErrnoText(e)));
  }
  if (::rename(tmp.c_str(), path.c_str()) != 0) {
    const int e = errno;
    ::unlink(tmp.c_str());
    return Status::Io(fmt::format("{}: rename to {} failed: {}", tmp.string(), path.string(), ErrnoText(e)));
  }
  // Make the rename itself durable.
  const std::filesystem::path dir = path.has_parent_path() ? path.parent_path() : std::filesystem::path(".");
  const int dfd = ::open(dir.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
  if (dfd < 0) return Status::Io(fmt::format("{}: cannot open folder to fsync: {}", dir.string(), ErrnoText(errno)));
  const int rc = ::fsync(dfd);
  const int e = errno;
  ::close(dfd);
  if (rc != 0) return Status::Io(fmt::format("{}: fsync of folder failed: {}", dir.string(), ErrnoText(e)));
  return Status::Ok();
}

Result<ModelFileContents> LoadModel(const std::filesystem::path& path) {
  const int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) {
    const int e = errno;
    if (e == ENOENT) return Status::NotFound(fmt::format("{}: no such model file", path.string()));
    return Status::Io(fmt::format("{}: cannot open: {}", path.string(), ErrnoText(e)));
  }
  struct stat st {};
  if (::fstat(fd, &st) != 0) {
    const int e = errno;
    ::close(fd);
    return Status::Io(fmt::format("{}: cannot stat: {}", path.string(), ErrnoText(e)));
  }
  if (!S_ISREG(st.st_mode)) {
    ::close(fd);
    return Status::Invalid(fmt::format("{}: not a regular file", path.string()));
  }
  if (static_cast<std::uint64_t>(st.st_size) > kMaxModelFileBytes) {
    ::close(fd);
    return Status::Invalid(fmt::format("{}: {} bytes is larger than any model file ({} bytes at most)",
                                       path.string(), st.st_size, kMaxModelFileBytes));
  }
  std::string data;
  data.reserve(static_cast<size_t>(st.st_size));  // bounded by the check above
  char buf[1 << 16];
  for (;;) {
    const ssize_t n = ::read(fd, buf, sizeof buf);
    if (n < 0) {
      if (errno == EINTR) continue;
      const int e = errno;
      ::close(fd);
      return Status::Io(fmt::format("{}: read failed: {}", path.string(), ErrnoText(e)));
    }
    if (n == 0) break;
    data.append(buf, static_cast<size_t>(n));
    if (data.size() > kMaxModelFileBytes) {
      ::close(fd);
      return Status::Invalid(fmt::format("{}: larger than any model file", path.string()));
    }
  }
  ::close(fd);
  Result<ModelFileContents> contents = Deserialize(data);
  if (!contents.ok()) return Status(contents.status().code(), path.string() + ": " + contents.status().message());
  return contents;
}

}  // namespace lyapcast
