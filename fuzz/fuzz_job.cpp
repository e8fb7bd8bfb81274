// fuzz_job — libFuzzer target: the TOML job-file parser (jobs.hpp parse_job)
// on arbitrary bytes, then the dates a parsed job covers and the expansion
// of its path templates for the first and last of them.
//
// Contract checked: only seatilt::UsageError may escape (a job-file error,
// exit 2); a parsed job satisfies what jobs.hpp promises (an output
// template with date fields, fields not empty, values in their ranges).
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <string>

#include "seatilt/error.hpp"
#include "seatilt/jobs.hpp"

namespace {

[[noreturn]] void finding(const char* what) {
  std::fprintf(stderr, "fuzz_job: contract broken: %s\n", what);
  std::abort();
}
#define EXPECT(c)          \
  do {                     \
    if (!(c)) finding(#c); \
  } while (0)

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string text(reinterpret_cast<const char*>(data), size);
  seatilt::JobFile job;
  try {
    job = seatilt::parse_job(text, "/fuzz/jobs/daily.toml");
  } catch (const seatilt::UsageError& e) {
    EXPECT(std::string(e.what()).rfind("/fuzz/jobs/daily.toml", 0) == 0);
    return 0;
  }
  EXPECT(job.output.has_date_fields());
  EXPECT(!job.fields.empty());
  EXPECT(job.memory_mb >= 16);
  EXPECT(job.deflate >= 0 && job.deflate <= 9);
  EXPECT(job.lag_days >= 0 && job.lag_days <= 3660);
  EXPECT(!job.input.text().empty() && !job.output.text().empty());

  seatilt::DateRequest request;
  request.today = seatilt::Date{2031, 9, 17};
  try {
    const std::vector<seatilt::Date> dates = seatilt::job_dates(job, request);
    EXPECT(dates.size() <= 36600);
    for (std::size_t k = 1; k < dates.size(); ++k) EXPECT(dates[k - 1] < dates[k]);
    if (!dates.empty()) {
      (void)job.input.expand(dates.front());
      (void)job.output.expand(dates.back());
      EXPECT(!job.output.expand(dates.front()).empty());
    }
  } catch (const seatilt::UsageError&) {
  }
  return 0;
}
