#include "api_store.h"

namespace lyapcast {

Result<std::unique_ptr<ApiStore>> ApiStore::Open(const std::filesystem::path& path,
                                                 const std::vector<FeedLayout>& layouts) {
  std::unique_ptr<ApiStore> s(new ApiStore());
  for (int k = 0; k < 2; ++k) {
    auto store = WindowStore::Open(StoreOptions{path, false, 5000});
    if (!store.ok()) return store.status();
    if (Status st = (*store)->RegisterFeeds(layouts); !st.ok()) return st;
    if (k == 0) {
      s->reader_ = std::move(store).value();
    } else {
      s->registry_ = std::make_unique<ModelRegistry>(std::move(store).value());
    }
  }
  return s;
}

Result<std::vector<ModelRecord>> ApiStore::ListModels(std::uint32_t feed, int limit) {
  std::lock_guard lock(mu_);
  return registry_->List(feed, limit);
}

Result<ModelRecord> ApiStore::GetModel(std::uint32_t feed, std::int64_t version) {
  std::lock_guard lock(mu_);
  return registry_->Get(feed, version);
}

Result<ApiStore::Page> ApiStore::ReadSamples(std::uint32_t feed, DataTime from, DataTime to, int limit) {
  std::lock_guard lock(mu_);
  Page page;
  const auto want = static_cast<std::size_t>(limit);
  Status s = reader_->ReadRange(feed, from, to, std::min(limit + 1, 4096), [&](std::span<const Sample> slice) {
    for (const Sample& sample : slice) {
      if (page.samples.size() == want) {
        page.next = sample.t;  // one more exists: the next page starts here
        return false;
      }
      page.samples.push_back(sample);
    }
    return true;
  });
  if (!s.ok()) return s;
  return page;
}

Result<std::optional<Sample>> ApiStore::CompleteSampleAt(std::uint32_t feed, DataTime at, Micros lookback) {
  std::lock_guard lock(mu_);
  std::optional<Sample> found;
  Status s = reader_->ReadRange(feed, at - lookback, at + Micros(1), 1024, [&](std::span<const Sample> slice) {
    for (const Sample& sample : slice) {
      if (sample.complete()) found = sample;
    }
    return true;
  });
  if (!s.ok()) return s;
  return found;
}

}  // namespace lyapcast
