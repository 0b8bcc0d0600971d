// Model files: a trained one-step model with everything needed to serve it,
// in a versioned little-endian binary format (lyapcast model file, version
// 2 for the neural flow map, 3 for the other families).
//
//   offset  size  field
//   0       8     magic "LYAPMODL"
//   8       4     u32 format version = 2 or 3 (1 is still read)
//   12      4     u32 header length = 24 (bytes before the body)
//   16      8     u64 body length N
//   24      N     body
//   24+N    8     u64 checksum: FNV-1a 64 over bytes [0, 24+N)
//
// Version 2 body, a neural flow map, in order (str = u32 byte length +
// bytes; values = raw IEEE-754 of the model's scalar type, little-endian,
// so round trips are bit-exact):
//   u8  scalar type: 4 = float32, 8 = float64 (bytes per value)
//   u8  activation: 0 = tanh, 1 = silu
//   u32 channel count C, then C channel names (str)
//   u32 hidden layer count H, then H widths (u32)
//   f64 dt (model step in model time units)
//   i64 data step in microseconds; i64 model time unit in microseconds
//   values m[C], s[C], S[C], mu[C]
//   u64 P = number of network values, then P values: the Mlp flat layout
//       (per layer W column-major (out x in), then b; layers in order)
//   u32 metadata count K, then K pairs (key str, value str)
//   u32 role count R = C, then R u8 channel role codes (ChannelRole, in
//       learn/forecast_model.h: 0 = state); format version 2 only
//
// Version 3 body: u8 family code, then the family's body.
//   0 = neural flow map: the version-2 body above (written as version 2, so
//       older builds read it; read in both forms)
//   1 = polynomial map (learn/polynomial_map.h), all values f64:
//       u32 channel count C, then C channel names (str); u32 degree p;
//       f64 dt; i64 data step us; i64 model time unit us; m[C], s[C], S[C];
//       u64 P = F * C (F = C(C + p, p) monomials), then the readout W
//       (F x C) column-major; metadata and roles as in version 2.
//
// Version 1 is version 2 without the roles: its body ends after the
// metadata, and its channels are all state (a flow map predicts every
// channel). Deserialize reads all three; Serialize writes version 2 for a
// neural flow map and version 3 for a polynomial map.
//
// Checksum choice: FNV-1a 64 (Fowler/Noll/Vo, IETF draft-eastlake-fnv):
// table-free, any single-byte change always changes it, easy to recompute in
// Python. It detects accidents (torn or flipped bytes), not tampering.
//
// Readers validate before they allocate: every count is checked against the
// bytes that remain, shapes against ValidateMlpShape (a polynomial's degree
// and channels against PolynomialFeatures::Create). Errors:
//   kInvalidArgument  not a model file (magic), a newer format version, or
//                     (Serialize/SaveModel) inconsistent contents;
//   kCorruption       truncated, checksum mismatch, impossible sizes or
//                     values (with what and where);
//   kNotFound / kIoError  from the file system (LoadModel/SaveModel).
// Deserialize can also say which kind of problem it met (ModelFileProblem),
// for callers that answer with a stable code rather than only the message
// (the daemon's model upload, schedule/model_upload.h).
// Thread safety: all functions are reentrant; SaveModel is atomic with
// respect to readers (temp file + fsync + rename + directory fsync).
#pragma once

#include <cstdint>
#include <filesystem>
#include <memory>
#include <string>
#include <string_view>
#include <utility>
#include <variant>
#include <vector>

#include "core/data_time.h"
#include "core/status.h"
#include "learn/flow_map.h"
#include "learn/forecast_model.h"
#include "learn/polynomial_map.h"

namespace lyapcast {

inline constexpr char kModelFileMagic[8] = {'L', 'Y', 'A', 'P', 'M', 'O', 'D', 'L'};
inline constexpr std::uint32_t kModelFileVersion = 3;  // the newest version read and written
inline constexpr std::uint32_t kModelFileHeaderLength = 24;
inline constexpr std::uint64_t kMaxModelFileBytes = std::uint64_t{1} << 30;  // LoadModel refuses larger files

struct ModelFileContents {
  std::vector<std::string> channels;  // one valid, unique name per model channel, in model order
  Micros step_micros{};             // the feed's data step (> 0)
  Micros time_unit_micros = kSecond;  // one unit of model time in data time (> 0)
  // The model: a neural flow map (architecture, dt, m, s, S, mu and
  // weights; the alternative held is the stored scalar type) or a
  // polynomial map (never null when held).
  std::variant<FlowMap<float>, FlowMap<double>, std::shared_ptr<const PolynomialMap>> model;
  // Training metadata (feed id, data range, losses, ...), in order; keys
  // non-empty and unique.
  std::vector<std::pair<std::string, std::string>> metadata;
  // One role per channel, in model order. Serialize treats empty as all
  // state; Deserialize always fills it (all state for version-1 files).
  // Every role of a flow map is state (Serialize checks).
  std::vector<ChannelRole> roles;

  bool is_float32() const { return std::holds_alternative<FlowMap<float>>(model); }
  bool is_neural() const { return !std::holds_alternative<std::shared_ptr<const PolynomialMap>>(model); }
  // "neural_flow_map" or "polynomial_map" (ForecastModel::family).
  std::string_view family() const { return is_neural() ? "neural_flow_map" : "polynomial_map"; }
  // The model step in model time units (requires a non-empty model).
  double dt() const;
};

// What is wrong with bytes that Deserialize refuses.
enum class ModelFileProblem {
  kNone,
  kNotAModelFile,  // the magic is not "LYAPMODL"
  kFormatVersion,  // a format version this build does not read (newer, or 0)
  kTruncated,      // shorter than the header and checksum, or than the body the header announces
  kChecksum,       // the stored checksum does not match the bytes
  kUnknownRole,    // a channel role code this build does not know
  kNonFinite,      // a non-finite normalization value, mu or network weight
  kMalformed,      // anything else: impossible sizes, bad names, trailing bytes, ...
};
// "none", "not-a-model-file", "format-version", "truncated", "checksum",
// "unknown-role", "non-finite", "malformed".
const char* ModelFileProblemName(ModelFileProblem p);

// FNV-1a 64 of `bytes` (the file checksum).
std::uint64_t Fnv1a64(std::string_view bytes);

// The file bytes, or kInvalidArgument if `contents` is inconsistent (empty
// model, name count != channels, bad or duplicate names, non-positive
// steps, non-finite values, empty or duplicate metadata keys).
[[nodiscard]] Result<std::string> Serialize(const ModelFileContents& contents);

// Parses and validates file bytes (see the error classes above). When
// `problem` is given it is set to the kind of problem (kNone on success).
[[nodiscard]] Result<ModelFileContents> Deserialize(std::string_view bytes, ModelFileProblem* problem = nullptr);

// The scalar type a served model runs in.
enum class ModelScalar {
  kAsStored,  // the file's own type (float32 or float64)
  kFloat32,   // float, a float64 model rounded (the daemon serves float)
};

// The model of `contents` behind the ForecastModel seam (a NeuralFlowMap of
// the chosen scalar type, with the file's roles; a polynomial map as it is:
// it always runs in double). kInvalidArgument when the
// contents are inconsistent (an empty model, roles that do not fit it).
[[nodiscard]] Result<std::shared_ptr<const ForecastModel>> MakeForecastModel(
    const ModelFileContents& contents, ModelScalar scalar = ModelScalar::kAsStored);

// Puts a model that is in memory behind the seam into `contents->model`: a
// NeuralFlowMap<float> or <double> as its flow map, a PolynomialMap as it
// is. kInvalidArgument for a null model or a family files do not hold.
[[nodiscard]] Status SetFileModel(const std::shared_ptr<const ForecastModel>& model, ModelFileContents* contents);

// Serialize, then write `path` atomically: a temp file in the same folder,
// fsync, rename over `path`, fsync of the folder. The folder must exist.
[[nodiscard]] Status SaveModel(const std::filesystem::path& path, const ModelFileContents& contents);

// Reads and Deserializes `path`; messages start with the path.
[[nodiscard]] Result<ModelFileContents> LoadModel(const std::filesystem::path& path);

}  // namespace lyapcast
