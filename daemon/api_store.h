// ApiStore: the HTTP routes' read access to the database (model history and
// files, sample pages, activation goes through the Scheduler). Its own
// connections, used one request at a time; every call is one short read
// transaction, so ingest and WAL checkpoints never wait on the API.
//
// Threads: any io thread; calls are serialized by a mutex.
#pragma once

#include <memory>
#include <mutex>
#include <optional>
#include <vector>

#include "store/model_registry.h"
#include "store/window_store.h"

namespace lyapcast {

class ApiStore {
 public:
  [[nodiscard]] static Result<std::unique_ptr<ApiStore>> Open(const std::filesystem::path& path,
                                                              const std::vector<FeedLayout>& layouts);

  [[nodiscard]] Result<std::vector<ModelRecord>> ListModels(std::uint32_t feed, int limit);
  [[nodiscard]] Result<ModelRecord> GetModel(std::uint32_t feed, std::int64_t version);

  // Samples with from <= t < to, oldest first, at most `limit`; `next` is
  // the time to continue from when more remain in the range.
  struct Page {
    std::vector<Sample> samples;
    std::optional<DataTime> next;
  };
  [[nodiscard]] Result<Page> ReadSamples(std::uint32_t feed, DataTime from, DataTime to, int limit);

  // The newest complete sample at or before `at` (within `lookback`), if any.
  [[nodiscard]] Result<std::optional<Sample>> CompleteSampleAt(std::uint32_t feed, DataTime at, Micros lookback);

 private:
  ApiStore() = default;
  std::mutex mu_;
  std::unique_ptr<WindowStore> reader_;
  std::unique_ptr<ModelRegistry> registry_;
};

}  // namespace lyapcast
