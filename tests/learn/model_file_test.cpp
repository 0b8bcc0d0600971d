// Model files: bit-exact round trips (float32 and float64), the documented
// layout, atomic saving, and rejection of every corruption class without
// crashing (truncation, flipped bytes, bad magic, newer version, impossible
// sizes), plus random byte strings.
#include "learn/model_file.h"

#include <gtest/gtest.h>

#include <cstring>
#include <fstream>
#include <random>

#include "learn/learn_test_util.h"
#include "support/temp_dir.h"

namespace lyapcast {
namespace {

namespace fs = std::filesystem;

template <typename T>
FlowMap<T> SampleMap(Activation act = Activation::kSilu) {
  auto created = FlowMap<double>::Create(3, {16, 8}, act, 0.5);
  EXPECT_TRUE(created.ok());
  FlowMap<double> map = created.value();
  map.InitRandom(17);
  EXPECT_TRUE(map.SetNormalization(Eigen::Vector3d{1.0, -2.5, 300.0}, Eigen::Vector3d{0.5, 1.25, 3.0},
                                   Eigen::Vector3d{0.1, 0.2, 1e-3})
                  .ok());
  map.mu() = Eigen::Vector3d{0.25, -0.5, 1.0 / 3.0};
  map.network().b(1).setConstant(0.125);
  return map.template Cast<T>();
}

template <typename T>
ModelFileContents SampleContents() {
  ModelFileContents c;
  c.channels = {"flow", "dtemp_h", "dtemp_v"};
  c.step_micros = Micros(500'000);
  c.time_unit_micros = Micros(1'000'000);
  c.model = SampleMap<T>();
  c.metadata = {{"feed", "loop-a"}, {"train_loss", "0.00123"}, {"range", "2024-12-02T00:00:00Z/PT1H"}};
  return c;
}

std::string Bytes(const ModelFileContents& c) {
  auto bytes = Serialize(c);
  EXPECT_TRUE(bytes.ok()) << bytes.status().ToString();
  return bytes.ok() ? bytes.value() : std::string();
}

// Recomputes the trailing checksum after a deliberate edit, so the edit
// reaches the structural checks behind it.
void Reseal(std::string* bytes) {
  const std::uint64_t h = Fnv1a64(std::string_view(*bytes).substr(0, bytes->size() - 8));
  for (int i = 0; i < 8; ++i) (*bytes)[bytes->size() - 8 + static_cast<size_t>(i)] = static_cast<char>(h >> (8 * i));
}

void PutU32At(std::string* bytes, size_t at, std::uint32_t v) {
  for (int i = 0; i < 4; ++i) (*bytes)[at + static_cast<size_t>(i)] = static_cast<char>(v >> (8 * i));
}

std::uint64_t GetU64At(const std::string& bytes, size_t at) {
  std::uint64_t v = 0;
  for (int i = 0; i < 8; ++i) v |= std::uint64_t{static_cast<unsigned char>(bytes[at + static_cast<size_t>(i)])} << (8 * i);
  return v;
}

// Offsets in the body of SampleContents (layout in model_file.h).
constexpr size_t kChannelCountAt = 24 + 2;
constexpr size_t kFirstNameAt = kChannelCountAt + 4;
constexpr size_t kHiddenCountAt = kFirstNameAt + (4 + 4) + (4 + 7) + (4 + 7);
constexpr size_t kFirstWidthAt = kHiddenCountAt + 4;
constexpr size_t kValuesAt = kFirstWidthAt + 2 * 4 + 8 + 8 + 8;

template <typename T>
void ExpectSameModel(const ModelFileContents& a, const ModelFileContents& b) {
  ASSERT_EQ(a.is_float32(), b.is_float32());
  const auto& ma = std::get<FlowMap<T>>(a.model);
  const auto& mb = std::get<FlowMap<T>>(b.model);
  EXPECT_EQ(a.channels, b.channels);
  EXPECT_EQ(a.step_micros, b.step_micros);
  EXPECT_EQ(a.time_unit_micros, b.time_unit_micros);
  EXPECT_EQ(a.metadata, b.metadata);
  EXPECT_EQ(ma.hidden(), mb.hidden());
  EXPECT_EQ(ma.activation(), mb.activation());
  const double dta = ma.dt(), dtb = mb.dt();
  EXPECT_EQ(std::memcmp(&dta, &dtb, sizeof(double)), 0);
  auto same_bits = [](const auto& x, const auto& y) {
    return x.size() == y.size() && std::memcmp(x.data(), y.data(), sizeof(T) * static_cast<size_t>(x.size())) == 0;
  };
  EXPECT_TRUE(same_bits(ma.mean(), mb.mean()));
  EXPECT_TRUE(same_bits(ma.stddev(), mb.stddev()));
  EXPECT_TRUE(same_bits(ma.increment_scale(), mb.increment_scale()));
  EXPECT_TRUE(same_bits(ma.parameters(), mb.parameters()));  // weights, biases and mu
}

TEST(ModelFile, RoundTripIsBitExactForDoubleAndFloat) {
  const ModelFileContents d = SampleContents<double>();
  auto back = Deserialize(Bytes(d));
  ASSERT_TRUE(back.ok()) << back.status().ToString();
  ExpectSameModel<double>(d, back.value());
  EXPECT_EQ(Bytes(back.value()), Bytes(d));

  const ModelFileContents f = SampleContents<float>();
  auto backf = Deserialize(Bytes(f));
  ASSERT_TRUE(backf.ok()) << backf.status().ToString();
  EXPECT_TRUE(backf->is_float32());
  ExpectSameModel<float>(f, backf.value());
  EXPECT_EQ(Bytes(backf.value()), Bytes(f));
}

TEST(ModelFile, HeaderAndChecksumFollowTheDocumentedLayout) {
  const std::string bytes = Bytes(SampleContents<double>());
  EXPECT_EQ(bytes.substr(0, 8), "LYAPMODL");
  EXPECT_EQ(bytes[8], 2);  // version 2, little-endian
  EXPECT_EQ(bytes[12], 24);
  EXPECT_EQ(GetU64At(bytes, 16), bytes.size() - 32);
  EXPECT_EQ(GetU64At(bytes, bytes.size() - 8), Fnv1a64(std::string_view(bytes).substr(0, bytes.size() - 8)));
  EXPECT_EQ(bytes[24], 8);  // float64
  EXPECT_EQ(bytes[25], 1);  // silu
  EXPECT_EQ(bytes[kChannelCountAt], 3);
  EXPECT_EQ(bytes.substr(kFirstNameAt + 4, 4), "flow");
  EXPECT_EQ(bytes[kHiddenCountAt], 2);
  EXPECT_EQ(bytes[kFirstWidthAt], 16);
  double m0;
  std::memcpy(&m0, bytes.data() + kValuesAt, 8);
  EXPECT_EQ(m0, 1.0);
  // FNV-1a 64 test vectors (Fowler/Noll/Vo reference, isthe.com/chongo/tech/comp/fnv).
  EXPECT_EQ(Fnv1a64(""), 0xcbf29ce484222325ull);
  EXPECT_EQ(Fnv1a64("a"), 0xaf63dc4c8601ec8cull);
  EXPECT_EQ(Fnv1a64("foobar"), 0x85944171f73967e8ull);
}

// The bytes the version-1 writer produced for `c`: version 2 without the
// roles section (its last 4 + C bytes before the checksum), header patched.
std::string VersionOneBytes(const ModelFileContents& c) {
  std::string bytes = Bytes(c);
  const size_t roles = 4 + c.channels.size();
  bytes.erase(bytes.size() - 8 - roles, roles);
  PutU32At(&bytes, 8, 1);
  const std::uint64_t body = bytes.size() - 32;
  for (int i = 0; i < 8; ++i) bytes[16 + static_cast<size_t>(i)] = static_cast<char>(body >> (8 * i));
  Reseal(&bytes);
  return bytes;
}

TEST(ModelFile, VersionTwoCarriesTheChannelRoles) {
  ModelFileContents c = SampleContents<double>();
  c.roles = {ChannelRole::kState, ChannelRole::kState, ChannelRole::kState};
  const std::string bytes = Bytes(c);
  // After the metadata: u32 role count 3, then one code (0 = state) each.
  EXPECT_EQ(GetU64At(bytes, bytes.size() - 8 - 7) & 0xffffffffu, 3u);
  EXPECT_EQ(bytes.substr(bytes.size() - 8 - 3, 3), std::string(3, '\0'));
  auto back = Deserialize(bytes);
  ASSERT_TRUE(back.ok()) << back.status().ToString();
  ExpectSameModel<double>(c, back.value());
  EXPECT_EQ(back->roles, c.roles);
  // Empty roles mean all state and write the same bytes.
  c.roles.clear();
  EXPECT_EQ(Bytes(c), bytes);
  // A flow map predicts every channel: a missing role is refused.
  c.roles = {ChannelRole::kState};
  EXPECT_EQ(Serialize(c).status().code(), StatusCode::kInvalidArgument);
  // An unknown role code is corruption.
  std::string bad = bytes;
  bad[bad.size() - 8 - 1] = 9;
  Reseal(&bad);
  const auto r = Deserialize(bad);
  EXPECT_EQ(r.status().code(), StatusCode::kCorruption);
  EXPECT_NE(r.status().message().find("role code 9"), std::string::npos) << r.status().ToString();
}

TEST(ModelFile, VersionOneFilesLoadWithAllStateRoles) {
  const ModelFileContents c = SampleContents<float>();
  const std::string v1 = VersionOneBytes(c);
  EXPECT_EQ(v1[8], 1);
  EXPECT_EQ(v1.size(), Bytes(c).size() - 7);
  auto back = Deserialize(v1);
  ASSERT_TRUE(back.ok()) << back.status().ToString();
  ExpectSameModel<float>(c, back.value());
  EXPECT_EQ(back->roles, AllStateRoles(3));
  // Re-saving upgrades to version 2.
  EXPECT_EQ(Bytes(back.value()), Bytes(c));
}

TEST(ModelFile, MakeForecastModelServesTheStoredMap) {
  const ModelFileContents d = SampleContents<double>();
  auto as_stored = MakeForecastModel(d);
  ASSERT_TRUE(as_stored.ok()) << as_stored.status().ToString();
  EXPECT_EQ((*as_stored)->family(), "neural_flow_map");
  EXPECT_EQ((*as_stored)->shape().roles, AllStateRoles(3));
  EXPECT_DOUBLE_EQ((*as_stored)->shape().dt, 0.5);
  ASSERT_NE(NeuralNetworkOf<double>(**as_stored), nullptr);
  EXPECT_EQ(NeuralNetworkOf<float>(**as_stored), nullptr);
  auto served = MakeForecastModel(d, ModelScalar::kFloat32);
  ASSERT_TRUE(served.ok()) << served.status().ToString();
  const FlowMap<float>* net = NeuralNetworkOf<float>(**served);
  ASSERT_NE(net, nullptr);
  EXPECT_EQ(net->parameters(), std::get<FlowMap<double>>(d.model).Cast<float>().parameters());
  ModelFileContents empty = d;
  empty.model = FlowMap<double>();
  EXPECT_EQ(MakeForecastModel(empty).status().code(), StatusCode::kInvalidArgument);
}

TEST(ModelFile, SaveAndLoadAtomically) {
  lyapcast::testing::TempDir dir("lyapcast-model-test");
  const fs::path path = dir.path() / "model.lyapmodel";
  ModelFileContents c = SampleContents<float>();
  ASSERT_TRUE(SaveModel(path, c).ok());
  c.metadata.emplace_back("version", "2");
  ASSERT_TRUE(SaveModel(path, c).ok());  // replaces
  auto loaded = LoadModel(path);
  ASSERT_TRUE(loaded.ok()) << loaded.status().ToString();
  ExpectSameModel<float>(c, loaded.value());
  int files = 0;
  for (const auto& e : fs::directory_iterator(dir.path())) {
    ++files;
    EXPECT_EQ(e.path().filename(), "model.lyapmodel");  // no temp file left
  }
  EXPECT_EQ(files, 1);

  EXPECT_EQ(LoadModel(dir.path() / "missing").status().code(), StatusCode::kNotFound);
  EXPECT_FALSE(LoadModel(dir.path()).ok());
  EXPECT_EQ(SaveModel(dir.path() / "no-such-dir" / "m", c).code(), StatusCode::kIoError);
  std::ofstream(dir.path() / "junk") << std::string("LYAPMODL\1\0\0\0", 12);
  const auto junk = LoadModel(dir.path() / "junk");
  EXPECT_EQ(junk.status().code(), StatusCode::kCorruption);
  EXPECT_NE(junk.status().message().find("junk"), std::string::npos) << "messages name the file";
}

TEST(ModelFile, SerializeRejectsInconsistentContents) {
  ModelFileContents c = SampleContents<double>();
  c.channels.pop_back();
  EXPECT_EQ(Serialize(c).status().code(), StatusCode::kInvalidArgument);
  c = SampleContents<double>();
  c.channels[1] = "flow";
  EXPECT_EQ(Serialize(c).status().code(), StatusCode::kInvalidArgument);
  c = SampleContents<double>();
  c.channels[1] = "bad name";
  EXPECT_EQ(Serialize(c).status().code(), StatusCode::kInvalidArgument);
  c = SampleContents<double>();
  c.metadata.emplace_back("feed", "again");
  EXPECT_EQ(Serialize(c).status().code(), StatusCode::kInvalidArgument);
  c = SampleContents<double>();
  c.step_micros = Micros{};
  EXPECT_EQ(Serialize(c).status().code(), StatusCode::kInvalidArgument);
  c = SampleContents<double>();
  std::get<FlowMap<double>>(c.model).network().W(0)(0, 0) = NAN;
  EXPECT_EQ(Serialize(c).status().code(), StatusCode::kInvalidArgument);
  c = SampleContents<double>();
  c.model = FlowMap<float>();
  EXPECT_EQ(Serialize(c).status().code(), StatusCode::kInvalidArgument);
}

TEST(ModelFileCorruption, TruncationAtEvery7thByteIsRejected) {
  for (const std::string& bytes : {Bytes(SampleContents<double>()), Bytes(SampleContents<float>())}) {
    for (size_t n = 0; n < bytes.size(); n += 7) {
      const auto r = Deserialize(std::string_view(bytes).substr(0, n));
      ASSERT_FALSE(r.ok()) << n;
      EXPECT_EQ(r.status().code(), StatusCode::kCorruption) << n << ": " << r.status().ToString();
      EXPECT_NE(r.status().message().find("truncated"), std::string::npos) << n << ": " << r.status().ToString();
    }
  }
}

TEST(ModelFileCorruption, EveryFlippedByteIsRejected) {
  const std::string good = Bytes(SampleContents<float>());
  for (size_t i = 0; i < good.size(); ++i) {
    for (const unsigned char mask : {0x01, 0x80, 0xff}) {
      std::string bad = good;
      bad[i] = static_cast<char>(bad[i] ^ mask);
      const auto r = Deserialize(bad);
      ASSERT_FALSE(r.ok()) << "byte " << i << " mask " << int{mask};
      const StatusCode code = r.status().code();
      EXPECT_TRUE(code == StatusCode::kCorruption || code == StatusCode::kInvalidArgument) << r.status().ToString();
    }
  }
  std::string bad = good;
  bad[good.size() / 2] ^= 0x10;
  EXPECT_NE(Deserialize(bad).status().message().find("checksum"), std::string::npos);
}

TEST(ModelFileCorruption, BadMagicAndNewerVersion) {
  std::string bytes = Bytes(SampleContents<double>());
  std::string bad = bytes;
  bad[7] = 'X';
  auto r = Deserialize(bad);
  EXPECT_EQ(r.status().code(), StatusCode::kInvalidArgument);
  EXPECT_NE(r.status().message().find("magic"), std::string::npos);
  EXPECT_EQ(Deserialize("GIF89a").status().code(), StatusCode::kInvalidArgument);

  bad = bytes;
  PutU32At(&bad, 8, kModelFileVersion + 1);
  Reseal(&bad);
  r = Deserialize(bad);
  EXPECT_EQ(r.status().code(), StatusCode::kInvalidArgument);
  EXPECT_NE(r.status().message().find("newer"), std::string::npos) << r.status().ToString();

  bad = bytes;
  PutU32At(&bad, 8, 0);
  Reseal(&bad);
  EXPECT_EQ(Deserialize(bad).status().code(), StatusCode::kCorruption);
}

// Impossible sizes behind a valid checksum: rejected by the structural
// checks before any allocation (ASan would report a huge allocation).
TEST(ModelFileCorruption, ImpossibleSizesAreRejectedBeforeAllocating) {
  const std::string good = Bytes(SampleContents<double>());
  auto expect = [](std::string bad, const char* needle) {
    Reseal(&bad);
    const auto r = Deserialize(bad);
    ASSERT_FALSE(r.ok()) << needle;
    EXPECT_EQ(r.status().code(), StatusCode::kCorruption) << r.status().ToString();
    EXPECT_NE(r.status().message().find(needle), std::string::npos) << r.status().ToString();
  };
  std::string bad = good;
  PutU32At(&bad, kFirstWidthAt, 1'000'000'000);
  expect(bad, "width 1000000000");
  bad = good;
  PutU32At(&bad, kFirstWidthAt, 0);
  expect(bad, "width 0");
  bad = good;
  PutU32At(&bad, kFirstWidthAt, 17);  // plausible, but the weights no longer fit
  expect(bad, "network value count");
  bad = good;
  PutU32At(&bad, kChannelCountAt, 0xffffffffu);
  expect(bad, "channel count");
  bad = good;
  PutU32At(&bad, kFirstNameAt, 0x7fffffffu);
  expect(bad, "name of channel 0");
  bad = good;
  PutU32At(&bad, kHiddenCountAt, 1'000'000);
  expect(bad, "hidden layer count");
  bad = good;
  PutU32At(&bad, kHiddenCountAt, 64);
  expect(bad, "hidden layer count");
  bad = good;
  const double negative = -1.0;  // s[0] must be > 0
  std::memcpy(bad.data() + kValuesAt + 3 * 8, &negative, 8);
  expect(bad, "std of channel 0");
  bad = good;
  bad[24] = 5;  // scalar type
  expect(bad, "scalar type");
  bad = good;
  bad[25] = 7;  // activation
  expect(bad, "activation");
  // The metadata count sits 4 bytes before the first key's length field;
  // the roles (count and 3 codes) follow the metadata.
  bad = good;
  const size_t meta_count_at = good.size() - 8 - (4 + 3) - (6 * 4 + 4 + 6 + 10 + 7 + 5 + 25) - 4;
  ASSERT_EQ(bad[meta_count_at], 3);
  PutU32At(&bad, meta_count_at, 0x40000000u);
  expect(bad, "metadata count");
  // Body length beyond the file, and extra bytes after the checksum.
  bad = good;
  bad[16] = static_cast<char>(0xff);
  bad[23] = 0x7f;
  expect(bad, "truncated");
  bad = good + "xyz";
  const auto r = Deserialize(bad);
  EXPECT_EQ(r.status().code(), StatusCode::kCorruption);
}

// Random byte strings, and random edits of a valid file resealed so they get
// past the checksum: Deserialize must return (ok or an error), never crash
// (run under ASan/UBSan in CI).
// Each refusal says which kind of problem it is (the upload route answers
// with a code per kind).
TEST(ModelFileCorruption, DeserializeNamesTheKindOfProblem) {
  const std::string good = Bytes(SampleContents<float>());
  const auto kind = [](std::string_view bytes) {
    ModelFileProblem p = ModelFileProblem::kMalformed;
    (void)Deserialize(bytes, &p);
    return p;
  };
  EXPECT_EQ(kind(good), ModelFileProblem::kNone);
  EXPECT_EQ(kind("GIF89a and so on, long enough for a header"), ModelFileProblem::kNotAModelFile);
  EXPECT_EQ(kind(std::string_view(good).substr(0, 20)), ModelFileProblem::kTruncated);
  EXPECT_EQ(kind(std::string_view(good).substr(0, good.size() - 1)), ModelFileProblem::kTruncated);
  std::string bad = good;
  bad[good.size() / 2] ^= 0x10;
  EXPECT_EQ(kind(bad), ModelFileProblem::kChecksum);
  bad = good;
  PutU32At(&bad, 8, kModelFileVersion + 1);
  Reseal(&bad);
  EXPECT_EQ(kind(bad), ModelFileProblem::kFormatVersion);
  bad = good;
  bad[bad.size() - 8 - 1] = 9;  // the last channel's role code
  Reseal(&bad);
  EXPECT_EQ(kind(bad), ModelFileProblem::kUnknownRole);
  bad = good;
  PutU32At(&bad, kChannelCountAt, 0);
  Reseal(&bad);
  EXPECT_EQ(kind(bad), ModelFileProblem::kMalformed);
  // A NaN among the values: the first channel mean, then the last weight
  // (float32 values; the weights end just before the metadata count).
  bad = good;
  PutU32At(&bad, kValuesAt, 0x7fc00000u);
  Reseal(&bad);
  auto r = Deserialize(bad);
  EXPECT_EQ(kind(bad), ModelFileProblem::kNonFinite);
  EXPECT_NE(r.status().message().find("non-finite channel mean of channel 0 ('flow')"), std::string::npos)
      << r.status().ToString();
  const ModelFileContents c = SampleContents<float>();
  size_t metadata_at = good.size() - 8 - (4 + 3) - 4;
  for (const auto& [key, value] : c.metadata) metadata_at -= 8 + key.size() + value.size();
  bad = good;
  PutU32At(&bad, metadata_at - 4, 0x7f800000u);  // +infinity
  Reseal(&bad);
  EXPECT_EQ(kind(bad), ModelFileProblem::kNonFinite);
  EXPECT_STREQ(ModelFileProblemName(ModelFileProblem::kChecksum), "checksum");
}

TEST(ModelFileCorruption, RandomInputsNeverCrash) {
  std::mt19937_64 rng(2024);
  const std::string good = Bytes(SampleContents<float>());
  int accepted = 0;
  for (int iter = 0; iter < 3000; ++iter) {
    std::string s;
    if (iter % 3 == 0) {
      s.resize(rng() % 200);
      for (char& ch : s) ch = static_cast<char>(rng());
      if (iter % 2 == 0 && s.size() >= 8) std::memcpy(s.data(), "LYAPMODL", 8);
    } else {
      s = good;
      const int edits = 1 + static_cast<int>(rng() % 4);
      for (int e = 0; e < edits; ++e) s[32 + rng() % (s.size() - 40)] = static_cast<char>(rng());
      if (iter % 2 == 0) s.resize(s.size() - rng() % 64);
      if (s.size() >= 8) Reseal(&s);
    }
    const auto r = Deserialize(s);
    if (r.ok()) ++accepted;  // an edit inside the weights yields a different valid model
  }
  EXPECT_LT(accepted, 3000);
}

}  // namespace
}  // namespace lyapcast

namespace lyapcast {
namespace {

ModelFileContents PolynomialContents() {
  auto features = PolynomialFeatures::Create(3, 3);
  EXPECT_TRUE(features.ok());
  auto map = PolynomialMap::Create(features.value(), 0.01, Eigen::Vector3d(0.5, -1.0, 23.5),
                                   Eigen::Vector3d(7.9, 9.0, 8.6), Eigen::Vector3d(0.75, 1.2, 1.0 / 3.0),
                                   testing::RandomMatrix(20, 3, 77, -2.0, 2.0));
  EXPECT_TRUE(map.ok());
  ModelFileContents c;
  c.channels = {"x", "y", "z"};
  c.step_micros = Micros(10'000);
  c.model = std::move(map).value();
  c.metadata = {{"feed", "lorenz"}};
  return c;
}

const PolynomialMap& PolynomialOf(const ModelFileContents& c) {
  return *std::get<std::shared_ptr<const PolynomialMap>>(c.model);
}

TEST(ModelFilePolynomial, RoundTripIsBitExactAsVersionThree) {
  const ModelFileContents c = PolynomialContents();
  const std::string bytes = Bytes(c);
  std::uint32_t version = 0;
  std::memcpy(&version, bytes.data() + 8, 4);
  EXPECT_EQ(version, 3U) << "a polynomial map is written as version 3";
  EXPECT_EQ(static_cast<unsigned char>(bytes[24]), 1) << "family code 1 opens the body";
  auto back = Deserialize(bytes);
  ASSERT_TRUE(back.ok()) << back.status().ToString();
  EXPECT_FALSE(back->is_neural());
  EXPECT_EQ(back->family(), "polynomial_map");
  EXPECT_EQ(back->channels, c.channels);
  EXPECT_EQ(back->step_micros, c.step_micros);
  EXPECT_EQ(back->dt(), 0.01);
  const PolynomialMap& a = PolynomialOf(c);
  const PolynomialMap& b = PolynomialOf(*back);
  EXPECT_EQ(b.features().degree(), 3);
  EXPECT_EQ(b.readout(), a.readout());
  EXPECT_EQ(b.mean(), a.mean());
  EXPECT_EQ(b.stddev(), a.stddev());
  EXPECT_EQ(b.increment_scale(), a.increment_scale());
  EXPECT_EQ(Bytes(*back), bytes);
  auto served = MakeForecastModel(*back, ModelScalar::kFloat32);
  ASSERT_TRUE(served.ok());
  EXPECT_EQ(served.value()->family(), "polynomial_map") << "a polynomial map always runs in double";
  // A neural flow map stays version 2, which older builds read.
  const std::string neural = Bytes(SampleContents<float>());
  std::memcpy(&version, neural.data() + 8, 4);
  EXPECT_EQ(version, 2U);
}

TEST(ModelFilePolynomial, SetFileModelStoresEitherFamily) {
  const ModelFileContents c = PolynomialContents();
  ModelFileContents d;
  d.channels = c.channels;
  d.step_micros = c.step_micros;
  d.metadata = c.metadata;
  ASSERT_TRUE(SetFileModel(std::get<std::shared_ptr<const PolynomialMap>>(c.model), &d).ok());
  EXPECT_EQ(Bytes(d), Bytes([&] {
              ModelFileContents e = c;
              e.roles = AllStateRoles(3);
              return e;
            }()));
  ASSERT_TRUE(SetFileModel(std::make_shared<const NeuralFlowMap<float>>(SampleMap<float>()), &d).ok());
  EXPECT_TRUE(d.is_float32());
  EXPECT_FALSE(SetFileModel(nullptr, &d).ok());
}

TEST(ModelFilePolynomial, DamagedFilesAreRefusedWithTheirKind) {
  const std::string good = Bytes(PolynomialContents());
  for (size_t cut = 0; cut < good.size(); cut += 5) EXPECT_FALSE(Deserialize(good.substr(0, cut)).ok()) << cut;
  for (size_t at = 0; at < good.size(); ++at) {
    std::string bad = good;
    bad[at] ^= 0x21;
    EXPECT_FALSE(Deserialize(bad).ok()) << "flipped byte " << at;
  }
  ModelFileProblem problem = ModelFileProblem::kNone;
  std::string bad = good;
  bad[24] = 7;  // family code
  Reseal(&bad);
  auto r = Deserialize(bad, &problem);
  ASSERT_FALSE(r.ok());
  EXPECT_NE(r.status().message().find("family code 7"), std::string::npos) << r.status().message();
  EXPECT_EQ(problem, ModelFileProblem::kMalformed);
  // The degree (after the family byte and three one-letter names): 9 is
  // beyond what a polynomial map may have.
  constexpr size_t kDegreeAt = 24 + 1 + 4 + 3 * (4 + 1);
  bad = good;
  PutU32At(&bad, kDegreeAt, 9);
  Reseal(&bad);
  r = Deserialize(bad, &problem);
  ASSERT_FALSE(r.ok());
  EXPECT_NE(r.status().message().find("degree 9"), std::string::npos) << r.status().message();
  // Degree 2 needs 10 x 3 readout values, not the 20 x 3 stored.
  bad = good;
  PutU32At(&bad, kDegreeAt, 2);
  Reseal(&bad);
  r = Deserialize(bad, &problem);
  ASSERT_FALSE(r.ok());
  EXPECT_NE(r.status().message().find("readout value count 60"), std::string::npos) << r.status().message();
  // A NaN in the readout (its first value, after dt, step, unit, m, s, S and the count).
  constexpr size_t kReadoutAt = kDegreeAt + 4 + 8 + 8 + 8 + 3 * 8 * 3 + 8;
  bad = good;
  const std::uint64_t nan = 0x7ff8000000000000ull;
  std::memcpy(bad.data() + kReadoutAt, &nan, 8);
  Reseal(&bad);
  r = Deserialize(bad, &problem);
  ASSERT_FALSE(r.ok());
  EXPECT_EQ(problem, ModelFileProblem::kNonFinite) << r.status().message();
}

}  // namespace
}  // namespace lyapcast
