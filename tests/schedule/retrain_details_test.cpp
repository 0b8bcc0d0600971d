// RetrainDetails: one serializer, a tolerant parser, exact round trips.
#include "schedule/retrain_details.h"

#include <gtest/gtest.h>

#include <cmath>
#include <limits>

namespace lyapcast {
namespace {

TEST(RetrainDetails, RoundTripsEveryFieldExactly) {
  RetrainDetails d;
  d.strategy = "supervised";
  d.trigger = "drift";
  d.iterations = 1234;
  d.seconds = 0.1 + 0.2;  // not exact in decimal
  d.stop = "early_stopping";
  d.train_pairs = 900;
  d.selection_pairs = 51;
  d.validation_pairs = 50;
  d.validation_per_channel = {1.0 / 3.0, std::numeric_limits<double>::quiet_NaN(), 2e-7};
  d.active_error = 0.0123456789012345;
  d.refit = "channel 0: mean \"1\" -> 4";  // quotes must be escaped
  d.data_exponent = 0.1 / 3.0;
  d.dynamics_exponent = std::nullopt;
  const RetrainDetails back = ParseRetrainDetails(ToJson(d));
  EXPECT_EQ(back.strategy, d.strategy);
  EXPECT_EQ(back.trigger, d.trigger);
  EXPECT_EQ(back.iterations, d.iterations);
  EXPECT_EQ(back.seconds, d.seconds);
  EXPECT_EQ(back.stop, d.stop);
  EXPECT_EQ(back.train_pairs, d.train_pairs);
  EXPECT_EQ(back.selection_pairs, d.selection_pairs);
  EXPECT_EQ(back.validation_pairs, d.validation_pairs);
  ASSERT_EQ(back.validation_per_channel.size(), 3u);
  EXPECT_EQ(back.validation_per_channel[0], 1.0 / 3.0);
  EXPECT_TRUE(std::isnan(back.validation_per_channel[1]));  // written as null
  EXPECT_EQ(back.validation_per_channel[2], 2e-7);
  EXPECT_EQ(back.active_error, d.active_error);
  EXPECT_EQ(back.refit, d.refit);
  EXPECT_EQ(back.data_exponent, d.data_exponent);
  EXPECT_FALSE(back.dynamics_exponent.has_value());
  EXPECT_NE(ToJson(d).find(R"("dynamics":null)"), std::string::npos) << ToJson(d);
}

// An uploaded version's details: what its file said and what judged it;
// other versions have no `upload` object.
TEST(RetrainDetails, RoundTripsTheUploadObjectOnlyWhenThereIsOne) {
  RetrainDetails d;
  d.trigger = "upload";
  UploadDetails u;
  u.file_feed = "loop-a";
  u.source = "lyapcast train";
  u.bytes = 5123;
  u.activate = true;
  u.judged_on = "40 held-out pairs";
  u.file_validation_error = 1.0 / 7.0;
  d.upload = u;
  const RetrainDetails back = ParseRetrainDetails(ToJson(d));
  ASSERT_TRUE(back.upload.has_value());
  EXPECT_EQ(back.upload->file_feed, "loop-a");
  EXPECT_EQ(back.upload->source, "lyapcast train");
  EXPECT_EQ(back.upload->bytes, 5123);
  EXPECT_TRUE(back.upload->activate);
  EXPECT_EQ(back.upload->judged_on, "40 held-out pairs");
  EXPECT_EQ(back.upload->file_validation_error, 1.0 / 7.0);
  d.upload.reset();
  EXPECT_EQ(ToJson(d).find("upload\":"), std::string::npos) << ToJson(d);
  EXPECT_FALSE(ParseRetrainDetails(ToJson(d)).upload.has_value());
}

TEST(RetrainDetails, ToleratesTextThatIsNotWhatItWrote) {
  EXPECT_EQ(ParseRetrainDetails("not json").iterations, 0);
  EXPECT_EQ(ParseRetrainDetails("[1, 2]").strategy, "supervised");
  const RetrainDetails d = ParseRetrainDetails(R"({"iterations":"many","exponents":{"data":"fast","dynamics":2.5},)"
                                               R"("validation_per_channel":[0.5,"x"],"extra":{}})");
  EXPECT_EQ(d.iterations, 0);
  EXPECT_FALSE(d.data_exponent.has_value());
  EXPECT_EQ(d.dynamics_exponent, 2.5);
  ASSERT_EQ(d.validation_per_channel.size(), 2u);
  EXPECT_TRUE(std::isnan(d.validation_per_channel[1]));
}

// The drift monitor's denominator: RMS over channels, finite entries only.
TEST(RetrainDetails, ValidationRmsIsTheRmsOverFiniteChannels) {
  RetrainDetails d;
  EXPECT_FALSE(ValidationRms(d).has_value());
  d.validation_per_channel = {3.0, std::numeric_limits<double>::quiet_NaN(), 4.0};
  EXPECT_DOUBLE_EQ(*ValidationRms(d), std::sqrt((9.0 + 16.0) / 2.0));
}

}  // namespace
}  // namespace lyapcast
