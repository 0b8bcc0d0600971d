// Model upload: validation of the bytes against a feed (every refusal with
// its kind and a message naming what is wrong), and the upload job on a real
// SQLite window: activated on request, or judged like a retraining candidate
// (a poor model rejected while the active version stays, a good one
// promoted), recorded with origin `uploaded`, no parent and its file bytes
// verbatim; without data a judged upload is rejected and an activated one
// keeps the training range its file names.
// Data: Lorenz-63 (constants of docs/references.md "Systems") from the project's RK4.
#include "schedule/model_upload.h"

#include <gtest/gtest.h>

#include "schedule/retrain_data.h"
#include "schedule/retrain_details.h"

#include "support/feeds.h"
#include "support/temp_dir.h"

namespace lyapcast {
namespace {

namespace fs = std::filesystem;

FeedConfig Feed() {
  FeedConfig f = testing::LorenzFeed();
  f.model.hidden = {16, 16};
  f.retrain.iterations = 150;
  f.retrain.batch = 64;
  f.retrain.min_pairs = 500;
  f.retrain.learning_rate = 3e-3;
  return f;
}

// A 3-8-3 map with random weights and a huge increment scale: one step moves
// far from where Lorenz-63 goes, so its one-step error is poor.
template <typename T = float>
FlowMap<T> PoorMap(int channels = 3, double dt = 0.01) {
  FlowMap<T> map = FlowMap<T>::Create(channels, {8}, Activation::kTanh, dt).value();
  using Vec = typename FlowMap<T>::Vec;
  EXPECT_TRUE(map.SetNormalization(Vec::Constant(channels, 1), Vec::Constant(channels, 8),
                                   Vec::Constant(channels, 2000))
                  .ok());
  map.InitRandom(5);
  return map;
}

ModelFileContents ContentsFor(const FeedConfig& feed, decltype(ModelFileContents::model) map) {
  ModelFileContents c;
  c.channels = feed.channels;
  c.step_micros = feed.step;
  c.time_unit_micros = feed.dynamics ? feed.dynamics->time_unit : kSecond;
  c.model = std::move(map);
  c.metadata = {{"feed", feed.id},
                {"trained_from", "1970-01-01T00:00:00Z"},
                {"trained_to", "1970-01-01T00:00:05Z"},
                {"validation_error", "2.5e-01"},
                {"source", "lyapcast train"}};
  return c;
}

std::string Bytes(const ModelFileContents& c) {
  auto bytes = Serialize(c);
  EXPECT_TRUE(bytes.ok()) << bytes.status().ToString();
  return bytes.ok() ? *bytes : std::string();
}

void Reseal(std::string* bytes) {
  const std::uint64_t h = Fnv1a64(std::string_view(*bytes).substr(0, bytes->size() - 8));
  for (int i = 0; i < 8; ++i) (*bytes)[bytes->size() - 8 + static_cast<size_t>(i)] = static_cast<char>(h >> (8 * i));
}

void PutU32At(std::string* bytes, size_t at, std::uint32_t v) {
  for (int i = 0; i < 4; ++i) (*bytes)[at + static_cast<size_t>(i)] = static_cast<char>(v >> (8 * i));
}

struct Refusal {
  UploadProblem problem = UploadProblem::kNone;
  std::string message;
};

Refusal Refuse(std::string bytes, const FeedConfig& feed) {
  Refusal r;
  auto v = ValidateUpload(std::move(bytes), feed, &r.problem);
  EXPECT_FALSE(v.ok());
  if (!v.ok()) r.message = v.status().message();
  return r;
}

TEST(ValidateUpload, AcceptsAFileOfTheFeedAndReadsItsMetadata) {
  const FeedConfig feed = Feed();
  const std::string bytes = Bytes(ContentsFor(feed, PoorMap()));
  UploadProblem problem = UploadProblem::kBadFile;
  auto v = ValidateUpload(bytes, feed, &problem);
  ASSERT_TRUE(v.ok()) << v.status().ToString();
  EXPECT_EQ(problem, UploadProblem::kNone);
  EXPECT_EQ(v->file, bytes);
  EXPECT_EQ(v->file_feed, "lorenz");
  EXPECT_EQ(v->source, "lyapcast train");
  EXPECT_EQ(v->trained_to, DataTimeFromMicros(5'000'000));
  EXPECT_EQ(v->trained_from, DataTime{});
  EXPECT_EQ(v->validation_error, 0.25);
  ASSERT_NE(NeuralNetworkOf<float>(*v->model), nullptr);
  EXPECT_EQ(NeuralNetworkOf<float>(*v->model)->parameters(), PoorMap().parameters());
  // A float64 file is served in float.
  auto wide = ValidateUpload(Bytes(ContentsFor(feed, PoorMap<double>())), feed);
  ASSERT_TRUE(wide.ok()) << wide.status().ToString();
  ASSERT_NE(NeuralNetworkOf<float>(*wide->model), nullptr);
  EXPECT_EQ(NeuralNetworkOf<float>(*wide->model)->parameters(), PoorMap<double>().Cast<float>().parameters());
}

TEST(ValidateUpload, RefusesDamagedFilesWithTheirKind) {
  const FeedConfig feed = Feed();
  const std::string good = Bytes(ContentsFor(feed, PoorMap()));
  Refusal r = Refuse("", feed);
  EXPECT_EQ(r.problem, UploadProblem::kEmpty);
  EXPECT_NE(r.message.find("empty"), std::string::npos) << r.message;
  r = Refuse(std::string(kMaxUploadBytes + 1, 'x'), feed);
  EXPECT_EQ(r.problem, UploadProblem::kTooLarge);
  EXPECT_NE(r.message.find("16777216"), std::string::npos) << r.message;
  r = Refuse("GIF89a, certainly not a model file", feed);
  EXPECT_EQ(r.problem, UploadProblem::kBadFile);
  EXPECT_NE(r.message.find("magic"), std::string::npos) << r.message;
  r = Refuse(good.substr(0, good.size() / 2), feed);
  EXPECT_EQ(r.problem, UploadProblem::kTruncated);
  EXPECT_NE(r.message.find("truncated"), std::string::npos) << r.message;
  std::string bad = good;
  bad[good.size() / 2] ^= 0x04;
  r = Refuse(bad, feed);
  EXPECT_EQ(r.problem, UploadProblem::kChecksum);
  EXPECT_NE(r.message.find("checksum mismatch"), std::string::npos) << r.message;
  bad = good;
  PutU32At(&bad, 8, kModelFileVersion + 1);
  Reseal(&bad);
  r = Refuse(bad, feed);
  EXPECT_EQ(r.problem, UploadProblem::kFormatVersion);
  EXPECT_NE(r.message.find("format version " + std::to_string(kModelFileVersion + 1)), std::string::npos) << r.message;
  // The first channel mean (3 one-letter names, one hidden layer): NaN.
  constexpr size_t kMeanAt = 24 + 1 + 1 + 4 + 3 * (4 + 1) + 4 + 4 + 8 + 8 + 8;
  bad = good;
  PutU32At(&bad, kMeanAt, 0x7fc00000u);
  Reseal(&bad);
  r = Refuse(bad, feed);
  EXPECT_EQ(r.problem, UploadProblem::kNonFinite);
  EXPECT_NE(r.message.find("non-finite"), std::string::npos) << r.message;
  // A float64 weight beyond float32's range.
  FlowMap<double> huge = PoorMap<double>();
  huge.parameters()[0] = 1e300;
  r = Refuse(Bytes(ContentsFor(feed, huge)), feed);
  EXPECT_EQ(r.problem, UploadProblem::kNonFinite);
  EXPECT_NE(r.message.find("float32"), std::string::npos) << r.message;
  // A role code this build does not know (the last byte before the checksum).
  bad = good;
  bad[bad.size() - 9] = 1;
  Reseal(&bad);
  r = Refuse(bad, feed);
  EXPECT_EQ(r.problem, UploadProblem::kWrongRoles);
  EXPECT_NE(r.message.find("role code 1"), std::string::npos) << r.message;
  EXPECT_STREQ(UploadProblemCode(UploadProblem::kChecksum), "checksum-mismatch");
  EXPECT_STREQ(UploadProblemCode(UploadProblem::kWrongRoles), "wrong-roles");
}

TEST(ValidateUpload, RefusesAModelOfAnotherShapeNamingWhatDiffers) {
  const FeedConfig feed = Feed();
  // Another feed's model: two channels.
  FeedConfig rig = Feed();
  rig.id = "rig";
  rig.channels = {"x", "v"};
  Refusal r = Refuse(Bytes(ContentsFor(rig, PoorMap(2))), feed);
  EXPECT_EQ(r.problem, UploadProblem::kWrongChannels);
  EXPECT_NE(r.message.find("the model has 2 channels (x, v) but feed 'lorenz' has 3 (x, y, z)"), std::string::npos)
      << r.message;
  EXPECT_NE(r.message.find("trained for feed 'rig'"), std::string::npos) << r.message;
  // The right count, another order.
  FeedConfig swapped = Feed();
  swapped.channels = {"y", "x", "z"};
  r = Refuse(Bytes(ContentsFor(swapped, PoorMap())), feed);
  EXPECT_EQ(r.problem, UploadProblem::kWrongChannels);
  EXPECT_NE(r.message.find("channel 0 is 'y' in the model but 'x' in feed 'lorenz'"), std::string::npos)
      << r.message;
  // Another step, another time unit, a dt that does not match the step.
  FeedConfig slow = Feed();
  slow.step = Micros(20'000);
  r = Refuse(Bytes(ContentsFor(slow, PoorMap(3, 0.02))), feed);
  EXPECT_EQ(r.problem, UploadProblem::kWrongStep);
  EXPECT_NE(r.message.find("the model steps 20ms but feed 'lorenz' has a step of 10ms"), std::string::npos)
      << r.message;
  ModelFileContents c = ContentsFor(feed, PoorMap(3, 10.0));
  c.time_unit_micros = Micros(1'000);
  r = Refuse(Bytes(c), feed);
  EXPECT_EQ(r.problem, UploadProblem::kWrongStep);
  EXPECT_NE(r.message.find("time unit is 1ms"), std::string::npos) << r.message;
  r = Refuse(Bytes(ContentsFor(feed, PoorMap(3, 0.02))), feed);
  EXPECT_EQ(r.problem, UploadProblem::kWrongStep);
  EXPECT_NE(r.message.find("dt is 0.02"), std::string::npos) << r.message;
}

// A window with a trained active version (as the scheduler would have it).
struct Db {
  testing::TempDir dir{"lyapcast-upload-test"};
  fs::path path = dir.path() / "w.db";
  std::unique_ptr<WindowStore> writer = Open();
  std::unique_ptr<WindowStore> reader = Open();
  ModelRegistry registry{Open()};
  FeedConfig feed = Feed();

  std::unique_ptr<WindowStore> Open() {
    auto s = WindowStore::Open(StoreOptions{path, false, 5000});
    EXPECT_TRUE(s.ok()) << s.status().ToString();
    EXPECT_TRUE((*s)->RegisterFeeds({{"lorenz", {"x", "y", "z"}, Micros(10'000)}}).ok());
    return std::move(s).value();
  }
  void Add(const std::vector<FeedSample>& samples) {
    std::vector<InsertOutcome> outcomes;
    ASSERT_TRUE(writer->InsertBatch(samples, &outcomes).ok());
  }
  std::shared_ptr<const ActiveModel> Active() {
    auto a = registry.Active(0);
    EXPECT_TRUE(a.ok());
    if (!a.ok() || !a->has_value()) return nullptr;
    return MakeActiveModel(**a).value();
  }
  void TrainFirstModel(DataTime until) {
    auto window = ReadWindow(*reader, 0, DataTime{}, until);
    ASSERT_TRUE(window.ok());
    RetrainInput in;
    in.feed = &feed;
    in.until = until;
    in.window = *window;
    in.lockstep = true;
    auto out = RunRetrain(registry, in);
    ASSERT_TRUE(out.ok()) << out.status().ToString();
    ASSERT_EQ(out->verdict, RetrainVerdict::kPromoted) << out->reason;
  }
  Result<UploadOutcome> Upload(const std::string& bytes, bool activate, DataTime until) {
    auto v = ValidateUpload(bytes, feed);
    if (!v.ok()) return v.status();
    auto window = ReadWindow(*reader, 0, DataTime{}, until);
    if (!window.ok()) return window.status();
    UploadInput in;
    in.feed = &feed;
    in.until = until;
    in.window = *window;
    in.active = Active();
    in.upload = std::make_shared<const ValidatedUpload>(std::move(v).value());
    in.activate = activate;
    in.requested = "over the API";
    in.data_exponent = 1.5;
    return RunUpload(registry, in);
  }
};

TEST(RunUpload, APoorModelIsRejectedAndTheActiveVersionStays) {
  Db db;
  db.Add(testing::LorenzSamples(1500, DataTime{}));
  db.TrainFirstModel(DataTimeFromMicros(12'000'000));  // 3 s of data after its training end
  const std::string poor = Bytes(ContentsFor(db.feed, PoorMap()));
  auto out = db.Upload(poor, /*activate=*/false, DataTimeFromMicros(15'000'000));
  ASSERT_TRUE(out.ok()) << out.status().ToString();
  EXPECT_EQ(out->verdict, RetrainVerdict::kRejected) << out->reason;
  EXPECT_EQ(out->version, 2);
  EXPECT_EQ(out->promoted, nullptr);
  EXPECT_GT(out->candidate_error, 2 * out->active_error);
  EXPECT_NE(out->reason.find("uploaded over the API and rejected: validation error"), std::string::npos)
      << out->reason;
  EXPECT_NE(out->reason.find("worse than active version 1"), std::string::npos) << out->reason;
  EXPECT_EQ(db.Active()->record.version, 1);
  const ModelRecord stored = db.registry.Get(0, 2).value();
  EXPECT_EQ(stored.status, ModelStatus::kRejected);
  EXPECT_EQ(stored.origin, ModelOrigin::kUploaded);
  EXPECT_FALSE(stored.parent.has_value());
  EXPECT_EQ(stored.file, poor);
  EXPECT_EQ(stored.validation_error, out->candidate_error);
  EXPECT_EQ(stored.data_exponent, 1.5);
  // The file's training range (seconds 0..5) is before the daemon's data end.
  EXPECT_EQ(stored.trained_from, DataTime{});
  EXPECT_EQ(stored.trained_to, DataTimeFromMicros(5'000'000));
  const RetrainDetails d = ParseRetrainDetails(stored.details);
  EXPECT_EQ(d.trigger, "upload");
  EXPECT_GT(d.validation_pairs, 0);
  EXPECT_EQ(d.validation_per_channel.size(), 3u);
  ASSERT_TRUE(d.active_error.has_value());
  ASSERT_TRUE(d.upload.has_value());
  EXPECT_EQ(d.upload->file_feed, "lorenz");
  EXPECT_EQ(d.upload->bytes, static_cast<std::int64_t>(poor.size()));
  EXPECT_FALSE(d.upload->activate);
  EXPECT_NE(d.upload->judged_on.find("since version 1 was trained"), std::string::npos) << d.upload->judged_on;
  EXPECT_EQ(d.upload->file_validation_error, 0.25);
}

TEST(RunUpload, AGoodModelIsPromotedAndAnActivatedOneServesAtOnce) {
  Db db;
  db.Add(testing::LorenzSamples(1500, DataTime{}));
  db.TrainFirstModel(DataTimeFromMicros(12'000'000));
  // The active version's own file uploaded again scores the same: promoted
  // (at most the active error times 1 + promote_tolerance).
  const std::string same = db.registry.Get(0, 1)->file;
  auto promoted = db.Upload(same, /*activate=*/false, DataTimeFromMicros(15'000'000));
  ASSERT_TRUE(promoted.ok()) << promoted.status().ToString();
  EXPECT_EQ(promoted->verdict, RetrainVerdict::kPromoted) << promoted->reason;
  EXPECT_EQ(promoted->candidate_error, promoted->active_error);
  ASSERT_NE(promoted->promoted, nullptr);
  EXPECT_EQ(promoted->promoted->record.origin, ModelOrigin::kUploaded);
  EXPECT_EQ(db.Active()->record.version, 2);
  EXPECT_EQ(db.registry.Get(0, 1)->status, ModelStatus::kRetired);
  EXPECT_TRUE(promoted->lambda_max.has_value());

  // A poor model activated on request serves at once, with its figures.
  auto activated = db.Upload(Bytes(ContentsFor(db.feed, PoorMap())), /*activate=*/true,
                             DataTimeFromMicros(15'000'000));
  ASSERT_TRUE(activated.ok()) << activated.status().ToString();
  EXPECT_EQ(activated->verdict, RetrainVerdict::kActivated);
  EXPECT_NE(activated->reason.find("uploaded over the API and activated on request: validation error"),
            std::string::npos)
      << activated->reason;
  ASSERT_NE(activated->promoted, nullptr);
  EXPECT_EQ(activated->promoted->record.version, 3);
  EXPECT_EQ(db.Active()->record.version, 3);
  EXPECT_EQ(db.registry.Get(0, 2)->status, ModelStatus::kRetired);
  EXPECT_TRUE(ParseRetrainDetails(db.registry.Get(0, 3)->details).upload->activate);
}

TEST(RunUpload, WithoutDataAJudgedUploadIsRejectedAndAnActivatedOneKeepsItsFilesRange) {
  Db db;
  const std::string poor = Bytes(ContentsFor(db.feed, PoorMap()));
  auto judged = db.Upload(poor, /*activate=*/false, DataTimeFromMicros(1));
  ASSERT_TRUE(judged.ok()) << judged.status().ToString();
  EXPECT_EQ(judged->verdict, RetrainVerdict::kRejected);
  EXPECT_NE(judged->reason.find("no held-out data"), std::string::npos) << judged->reason;
  EXPECT_NE(judged->reason.find("activate=true"), std::string::npos) << judged->reason;
  // Without a judged figure the file's own validation error is recorded.
  EXPECT_EQ(db.registry.Get(0, 1)->validation_error, 0.25);

  auto activated = db.Upload(poor, /*activate=*/true, DataTimeFromMicros(1));
  ASSERT_TRUE(activated.ok()) << activated.status().ToString();
  EXPECT_EQ(activated->verdict, RetrainVerdict::kActivated);
  EXPECT_EQ(activated->reason, "uploaded over the API and activated on request");
  const ModelRecord active = db.registry.Active(0)->value();
  EXPECT_EQ(active.version, 2);
  EXPECT_EQ(active.trained_to, DataTimeFromMicros(5'000'000));
}

TEST(RunUpload, AFileTrainedBeyondTheDaemonsDataCountsAsTrainedToItsEnd) {
  Db db;
  db.Add(testing::LorenzSamples(1500, DataTime{}));
  ModelFileContents c = ContentsFor(db.feed, PoorMap());
  c.metadata = {{"trained_to", "2030-01-01T00:00:00Z"}};
  auto out = db.Upload(Bytes(c), /*activate=*/true, DataTimeFromMicros(15'000'000));
  ASSERT_TRUE(out.ok()) << out.status().ToString();
  const ModelRecord stored = db.registry.Get(0, out->version).value();
  EXPECT_EQ(stored.trained_to, DataTimeFromMicros(15'000'000));
  EXPECT_EQ(stored.trained_from, stored.trained_to);
  // No active model to compare with: judged on the end of the window.
  EXPECT_NE(ParseRetrainDetails(stored.details).upload->judged_on.find("at the end of the window"),
            std::string::npos);
}

}  // namespace
}  // namespace lyapcast
