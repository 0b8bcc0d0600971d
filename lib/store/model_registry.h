// ModelRegistry: every model version of every feed, durable in SQLite before
// it is served (docs/design.md "Data flow"; schema version 4, table `models`).
//
// Versions count from 1 per feed. At most one version of a feed is 'active'
// (the one served); promoting a new version retires the previous active one
// in the same transaction, so a crash never leaves a feed with two active
// versions or none it had before. Rejected candidates are recorded with
// their reason and never become active by themselves; Activate() (an
// operator's pin or rollback) can make any stored version active.
//
// Threads: one instance per thread. It owns its own connection (a
// WindowStore opened on the same file), so registry writes never share a
// transaction with the sample writer; SQLite's WAL lets them interleave.
#pragma once

#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "core/data_time.h"
#include "core/status.h"
#include "store/window_store.h"

namespace lyapcast {

enum class ModelStatus { kActive, kRetired, kRejected };
const char* ModelStatusName(ModelStatus s);  // "active", "retired", "rejected"

// Where a version came from: trained by the daemon's retraining, or a model
// file an operator uploaded (schedule/model_upload.h).
enum class ModelOrigin { kTrained, kUploaded };
const char* ModelOriginName(ModelOrigin o);  // "trained", "uploaded"

struct ModelRecord {
  std::uint32_t feed = 0;          // config feed index
  std::int64_t version = 0;        // assigned by Insert
  ModelStatus status = ModelStatus::kRejected;
  ModelOrigin origin = ModelOrigin::kTrained;
  std::string reason;              // why promoted, rejected, retired or activated
  std::optional<std::int64_t> parent;  // version it was warm-started from (none for an upload)
  std::string created_at;          // wall time, RFC 3339 (set by Insert)
  DataTime trained_from{};       // data-time range of the training chunk
  DataTime trained_to{};
  std::optional<double> validation_error;
  // Largest Lyapunov exponents, per second of data time: the version's own
  // (lambda_max, from its learned map) and the feed's estimates from the
  // data and the known dynamics when it was trained, which pace the cadence
  // after it (a restarted daemon resumes with them).
  std::optional<double> lambda_max;
  std::optional<double> data_exponent, dynamics_exponent;
  std::string details = "{}";      // JSON object (schedule/retrain_details.h): losses, errors, timings
  std::string file;                // model file bytes (learn/model_file.h); empty in listings
};

class ModelRegistry {
 public:
  // Takes a WindowStore (its own connection) whose feeds are registered.
  explicit ModelRegistry(std::unique_ptr<WindowStore> store);
  ~ModelRegistry();

  // Stores `record` as the feed's next version and returns that version.
  // With status kActive, the feed's current active version (if any) becomes
  // kRetired with reason "replaced by version N", in the same transaction.
  [[nodiscard]] Result<std::int64_t> Insert(const ModelRecord& record);

  // The feed's active version with its file, or nullopt when it has none.
  [[nodiscard]] Result<std::optional<ModelRecord>> Active(std::uint32_t feed);

  // One version, with its file. kNotFound when it does not exist.
  [[nodiscard]] Result<ModelRecord> Get(std::uint32_t feed, std::int64_t version);

  // The newest `limit` versions, newest first, without their files.
  [[nodiscard]] Result<std::vector<ModelRecord>> List(std::uint32_t feed, int limit);

  // Makes `version` active (pin or roll back), retiring the current active
  // version; records `reason` on the newly active one. kNotFound if absent.
  [[nodiscard]] Status Activate(std::uint32_t feed, std::int64_t version, const std::string& reason);

  // Deletes retired and rejected versions beyond the newest `keep` of them,
  // never the active version nor its parent. Returns how many were deleted.
  [[nodiscard]] Result<int> Prune(std::uint32_t feed, int keep);

 private:
  struct Statements;
  [[nodiscard]] Status Prepare();
  std::unique_ptr<WindowStore> store_;
  std::unique_ptr<Statements> st_;
};

}  // namespace lyapcast
