// Feeding a SampleWriter from a test as ingest would: submissions in chunks
// without waiting, and a drain that returns once everything submitted has
// been committed and handed to the subscribers.
#pragma once

#include <gtest/gtest.h>

#include <algorithm>
#include <future>
#include <vector>

#include "store/sample_writer.h"

namespace lyapcast::testing {

// Submits `samples` in chunks of `chunk` without waiting (the writer groups them).
inline void SubmitInChunks(SampleWriter& writer, const std::vector<FeedSample>& samples, std::size_t chunk) {
  for (std::size_t i = 0; i < samples.size(); i += chunk) {
    std::vector<FeedSample> part(samples.begin() + static_cast<std::ptrdiff_t>(i),
                                 samples.begin() + static_cast<std::ptrdiff_t>(std::min(samples.size(), i + chunk)));
    ASSERT_TRUE(writer.Submit(std::move(part), [](std::vector<WriteOutcome>) {}));
  }
}

// Waits until everything submitted before is committed and handed to the
// subscribers (in lockstep: and every due job ran): submissions are grouped
// in order, and the writer completes a submission only after its group's
// subscribers ran. Two rounds, so the last waited-for submission is surely
// in a later group than every sample.
inline void Drain(SampleWriter& writer) {
  for (int round = 0; round < 2; ++round) {
    std::promise<void> done;
    ASSERT_TRUE(writer.Submit({}, [&done](std::vector<WriteOutcome>) { done.set_value(); }));
    done.get_future().wait();
  }
}

}  // namespace lyapcast::testing
