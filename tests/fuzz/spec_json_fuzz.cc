// Fuzzes the pool spec loader: JSON text -> PoolSpecFromJson -> CompilePoolSpec ->
// Pool::Create, as the daemon's ApplyPool and the CLI's --spec do with a file they are
// given. Errors are expected; crashes, sanitizer reports and broken invariants are not.
// A spec that compiles must make a pool (the two validate the same thing), and that pool
// must take frames and round-trip its state.
#include <cstddef>
#include <cstdint>
#include <string>

#include "absl/strings/string_view.h"
#include "core/io/spec_json.h"
#include "core/pool.h"
#include "core/pool_spec.h"
#include "tests/fuzz/fuzz_pools.h"

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  using namespace bellwether;
  const absl::string_view json(reinterpret_cast<const char*>(data), size);
  auto spec = PoolSpecFromJson(json);
  if (!spec.ok()) return 0;
  auto compiled = CompilePoolSpec(*spec);
  auto pool = Pool::Create(*spec);
  if (compiled.ok() != pool.ok()) {
    fuzz::Broken("CompilePoolSpec and Pool::Create disagree: " + compiled.status().ToString() +
                 " / " + pool.status().ToString());
  }
  if (!pool.ok()) return 0;
  fuzz::ProbePool(**pool);
  fuzz::CheckRoundTrip(**pool);
  return 0;
}
