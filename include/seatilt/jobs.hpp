// seatilt/jobs.hpp — unattended runs: TOML job files, dated path templates,
// the idempotent batch loop, the per-job lock, JSON-line logs.
//
// Owns: reading a job file (toml++) into a JobFile with every `currents`
// option checked by the same rules and messages as the command line
// (validate(), parse_field_list()), each problem reported as
// "JOB.toml:LINE: key: problem"; the calendar arithmetic of the dates a run
// covers (one day, a range, or catch-up of the last N days); expanding
// strftime-like path templates for a date; deciding per date whether to run,
// redo or skip (an output is complete when its global attribute
// seatilt_status = "complete", which run_currents writes last); removing
// temporary outputs left by dead processes; the exclusive flock(2) lock of a
// job; running the plan through run_currents with a cooperative stop between
// files and between row bands; one JSON line per file. After a day's
// currents output is complete, the job's optional steps run in the order
// quicklook, section (each in file order): [[quicklook]] tables draw a PNG
// map (quicklook.hpp) of the output (or of the input), [[section]] tables
// compute transports across sections (section.hpp) of the day's input.
// Steps publish atomically, are skipped when complete (step_output_state),
// redone with --force, and log one JSON line each. Does not print, exit or
// install signal handlers: src/cli/run.cpp does, through RunObserver and
// request_stop().
//
// Dates are whole days of the proleptic Gregorian calendar in UTC. A job
// file's relative paths (templates, lock_file, log_json) are relative to the
// folder of the job file, so a job behaves the same from cron (cwd = $HOME)
// and by hand.
//
// Template fields (std::strftime on a UTC struct tm at 00:00:00 of the date,
// "C" locale; anything else after % is a job-file error):
//   %Y year (2031)   %y year in century (31)   %C century (20)
//   %m month 01..12  %d day 01..31             %j day of year 001..366
//   %b %h month abbreviation (Sep)   %B month name (September)
//   %a weekday abbreviation (Wed)    %A weekday name (Wednesday)
//   %u weekday 1..7 (Monday = 1)     %w weekday 0..6 (Sunday = 0)
//   %U %W week of year 00..53 (weeks from Sunday, Monday)
//   %G %g %V ISO 8601 week-based year, its last two digits, week 01..53
//   %F = %Y-%m-%d    %H %M %S = 00 (midnight)    %% a literal %
//
// References
//  [1] TOML v1.0.0 (https://toml.io/en/v1.0.0): local dates, tables, keys.
//  [2] ISO C 7.27.3.5 / POSIX strftime: the conversion fields above.
//  [3] H. Hinnant (2013), "chrono-Compatible Low-Level Date Algorithms":
//      days_from_civil / civil_from_days (proleptic Gregorian).
//  [4] flock(2), Linux man-pages: the lock goes with the open file and is
//      released when the process ends, however it ends.
//  [5] BSD sysexits.h: EX_TEMPFAIL = 75, "temporary failure, retry later".
#pragma once

#include <cstddef>
#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "seatilt/error.hpp"
#include "seatilt/kernel.hpp"
#include "seatilt/quicklook.hpp"
#include "seatilt/reader.hpp"
#include "seatilt/section.hpp"
#include "seatilt/tiling.hpp"

namespace seatilt {

// ---- calendar -----------------------------------------------------------------

/// A calendar day (proleptic Gregorian, UTC). Ordering is chronological.
struct Date {
  int year = 1970;  ///< 1..9999
  int month = 1;    ///< 1..12
  int day = 1;      ///< 1..31, valid for the month

  /// Days since 1970-01-01 (negative before) [3].
  [[nodiscard]] std::int64_t days() const;
  /// The date DAYS after 1970-01-01 [3].
  static Date from_days(std::int64_t days);
  /// "YYYY-MM-DD".
  [[nodiscard]] std::string iso() const;
  /// This date plus N days (N may be negative).
  [[nodiscard]] Date plus(std::int64_t n) const { return from_days(days() + n); }
};
bool operator==(const Date& a, const Date& b);
bool operator<(const Date& a, const Date& b);
inline bool operator!=(const Date& a, const Date& b) { return !(a == b); }
inline bool operator<=(const Date& a, const Date& b) { return !(b < a); }

/// Parses "YYYY-MM-DD" (exactly that form, a real day, years 1..9999).
/// Returns nullopt otherwise.
std::optional<Date> parse_date(const std::string& text);

/// Today's date in UTC from the system clock.
Date today_utc();

// ---- path templates -------------------------------------------------------------

/// A path with strftime-like date fields (see the list at the top).
class PathTemplate {
 public:
  PathTemplate() = default;
  /// Checks TEXT. Throws UsageError "unknown date field %Q at character N
  /// (supported: ...)", "ends with a lone %" or "is empty".
  explicit PathTemplate(std::string text);

  /// Returns the path for DATE.
  [[nodiscard]] std::string expand(const Date& date) const;
  /// Whether any field depends on the date (everything but %H %M %S %%).
  [[nodiscard]] bool has_date_fields() const { return dated_; }
  [[nodiscard]] const std::string& text() const { return text_; }

 private:
  std::string text_;
  bool dated_ = false;
};

// ---- job files --------------------------------------------------------------------

/// What a run does for a date whose input file does not exist.
enum class MissingInput {
  fail,  ///< report it and count the date as failed (exit 5)
  skip,  ///< report it and go on (e.g. a product not issued at weekends)
};

/// A [[quicklook]] table: a PNG map made after the day's currents output.
struct QuicklookStep {
  PathTemplate output;       ///< `output`: PNG path template (relative -> folder), with date fields
  int line = 0;              ///< line of the table header (messages)
  bool of_input = false;     ///< `source = "input"`: draw the day's input instead of its output
  MapRequest request;        ///< `field`, `time`, `arrows` (as_height/units set per day)
  QuicklookOptions options;  ///< `region`, `range`, `arrows`, `width` (force set per day)
};

/// A [[section]] table: transport across sections of the day's input.
struct SectionStep {
  PathTemplate output;  ///< `output`: .csv or .nc/.nc4 path template, with date fields
  int line = 0;         ///< line of the table header (messages)
  std::vector<SectionLine> sections;  ///< `line` (+ `name`) and/or the `sections` file's
  /// `spacing` (km), `depth` (m); `equator_band`, `earth`, `gravity` default
  /// to the job's [currents] values.
  SectionOptions options;
};

/// A job file, checked and with every path absolute.
struct JobFile {
  std::string path;    ///< the job file as given on the command line
  std::string folder;  ///< absolute folder of the job file
  std::string name;    ///< `name`, default: the file name without ".toml"

  PathTemplate input;        ///< `input` (relative -> folder)
  PathTemplate output;       ///< `output` (relative -> folder); has date fields
  int output_line = 0;       ///< line of `output` (for plan errors)
  bool make_folders = true;  ///< `make_folders`: create missing output folders
  MissingInput missing_input = MissingInput::fail;
  std::string lock_file;  ///< `lock_file`, default "<job file>.lock"
  std::string log_json;   ///< `log_json`, "" = none

  // [dates]
  std::optional<Date> from, to;      ///< `from`, `to` (to needs from)
  std::optional<int> catch_up_days;  ///< 1..36600; excludes from/to
  int lag_days = 0;                  ///< 0..3660: newest day = today - lag

  // [currents], same meaning and defaults as the `currents` options
  ReaderOptions reader;
  CurrentsOptions options;
  std::vector<std::string> fields;  ///< from parse_field_list
  int deflate = 1;                  ///< 0..9
  int significant_digits = 0;       ///< 0..7
  int threads = 0;                  ///< 0 = all cores
  std::size_t rows = 0;             ///< 0 = from memory_mb
  std::size_t memory_mb = 256;      ///< >= 16

  // optional steps after the day's currents output ([[quicklook]], [[section]])
  std::vector<QuicklookStep> quicklooks;
  std::vector<SectionStep> sections;
};

/// Reads and checks the job file PATH. Throws UsageError
/// "PATH:LINE: problem" for TOML syntax, unknown keys or tables, wrong
/// types, bad values and bad templates, and "PATH: cannot read: ..." when
/// the file cannot be read. Never touches any other file.
JobFile load_job(const std::string& path);

/// Like load_job for TOML TEXT that is said to come from PATH (relative
/// paths resolve against PATH's folder, which need not exist).
JobFile parse_job(const std::string& text, const std::string& path);

// ---- dates of a run -------------------------------------------------------------------

/// Date choices from the command line (each overrides the job file).
struct DateRequest {
  std::optional<Date> date;          ///< --date: newest day of the window
  std::optional<Date> from, to;      ///< --from, --to
  std::optional<int> catch_up_days;  ///< --catch-up
  Date today;                        ///< today's UTC date (today_utc())
};

/// Returns the days a run covers, oldest first:
///  - --from F [--to T]: F..T (T defaults to today - lag_days);
///  - --date D and/or --catch-up N: N days ending at D (D defaults to
///    today - lag_days; N to the file's catch_up_days, else 1);
///  - otherwise the file: from..to (to defaults to today - lag_days), or
///    catch_up_days (default 1) days ending at today - lag_days.
/// A range starting after its end is empty only when `to` was defaulted
/// (nothing to do yet); otherwise, and for --to without --from, --date with
/// --from, N outside 1..36600 or more than 36600 days, throws UsageError.
std::vector<Date> job_dates(const JobFile& job, const DateRequest& request);

// ---- plan ---------------------------------------------------------------------------------

/// State of an output path.
enum class OutputState {
  absent,      ///< nothing there
  complete,    ///< netCDF with global seatilt_status = "complete"
  incomplete,  ///< anything else: unreadable, torn, without the marker, a folder
};

/// Returns the state of PATH (never throws).
OutputState output_state(const std::string& path);

/// What a run will do for one date.
enum class PlanAction {
  run,         ///< output absent: compute it
  redo,        ///< output incomplete (or complete with --force): compute it again
  skip,        ///< output complete
  missing,     ///< input absent, missing_input = fail: a failure
  missing_ok,  ///< input absent, missing_input = skip: nothing to do
};

/// Returns "run", "redo", "skip", "missing", "missing-ok".
const char* action_name(PlanAction action);

/// Kind of a step after the day's currents.
enum class StepKind { quicklook, section };

/// Returns "quicklook" or "section".
const char* step_name(StepKind kind);

/// State of a step's output PATH for a day whose currents output is
/// REFERENCE (never throws). complete: a regular file, whole for its kind
/// (netCDF, i.e. .nc/.nc4: global seatilt_status = "complete"; CSV: the
/// section header line and a final newline; anything else, e.g. PNG: the
/// PNG signature and an IEND chunk at the end), and modified no earlier
/// than REFERENCE (a step made from an older currents output is stale).
/// absent: nothing there. incomplete: anything else (stale, torn, foreign,
/// a folder).
OutputState step_output_state(const std::string& path, const std::string& reference);

/// What a run will do for one step of a date.
struct StepPlan {
  StepKind kind = StepKind::quicklook;
  std::size_t index = 0;                  ///< in JobFile::quicklooks or JobFile::sections
  std::string source;                     ///< the file it reads: the day's output, or input
  std::string output;                     ///< the file it writes
  PlanAction action = PlanAction::run;    ///< run, redo or skip
  OutputState was = OutputState::absent;  ///< output state when planned
};

struct PlanItem {
  Date date;
  std::string input, output;
  PlanAction action = PlanAction::run;
  OutputState was = OutputState::absent;  ///< output state when planned
  /// The steps (quicklooks, then sections, in file order); empty for days
  /// without input. When the currents are computed (run/redo) every step is
  /// run (output absent) or redone; otherwise each step is skipped when
  /// step_output_state is complete and made otherwise.
  std::vector<StepPlan> steps;
};

/// Expands the templates for DATES and looks at the files. Throws UsageError
/// "JOB:LINE: output: template gives one file for D1 and D2: PATH" when two
/// dates (or two steps, "JOB:LINE: quicklook.output: ...") share a file, and
/// "... output equals input" when a date's output path is its input path
/// (or a step's output is the day's input or currents output).
std::vector<PlanItem> make_plan(const JobFile& job, const std::vector<Date>& dates, bool force);

/// Removes temporary outputs ".<name>.tmp-<pid>-<8 hex>" (writer.hpp) whose
/// process no longer exists from the folders of PLAN's outputs. Returns the
/// removed paths. Never throws (a file that cannot be removed is kept).
std::vector<std::string> remove_stale_temporaries(const std::vector<PlanItem>& plan);

// ---- lock -----------------------------------------------------------------------------------

/// Exit code when another run holds the job's lock: 75, EX_TEMPFAIL [5].
inline constexpr int exit_busy = 75;

/// Another run holds the lock (exit 75).
class LockBusy : public Error {
 public:
  explicit LockBusy(const std::string& message)
      : Error(static_cast<ExitCode>(exit_busy), message) {}
};

/// An exclusive flock(2) on a lock file for the life of the object [4]. The
/// file (created 0644 when absent, never deleted: deleting a flock file
/// races with a waiting process) holds "pid P started ISO-TIME host H" of
/// the holder, for the message a second run prints. A crash or kill -9
/// releases the lock with the process, so a lock is never stale. Keep lock
/// files on a local file system. Move-only.
class JobLock {
 public:
  /// Takes the lock on PATH for job JOB_PATH without waiting. Throws LockBusy
  /// "JOB_PATH: another run holds the lock PATH (pid P, started T); try
  /// again later", OutputError "PATH: cannot open lock file: ..." otherwise.
  JobLock(const std::string& path, const std::string& job_path);
  ~JobLock();
  JobLock(JobLock&& other) noexcept;
  JobLock& operator=(JobLock&& other) noexcept;
  JobLock(const JobLock&) = delete;
  JobLock& operator=(const JobLock&) = delete;

 private:
  int fd_ = -1;
};

// ---- cooperative stop ---------------------------------------------------------------------

/// Records that signal SIGNO asked the run to stop. Async-signal-safe (a
/// lock-free atomic store), for SIGINT/SIGTERM handlers.
void request_stop(int signo) noexcept;
/// The signal number passed to request_stop, or 0.
int stop_signal() noexcept;
/// Forgets a stop request (tests).
void clear_stop() noexcept;

// ---- running ---------------------------------------------------------------------------------

enum class FileStatus {
  done,         ///< written (output was absent)
  redone,       ///< written over an incomplete output (or a complete one with --force)
  skipped,      ///< output already complete
  missing_ok,   ///< input absent, allowed by missing_input = "skip"
  failed,       ///< input missing or unusable, or output not writable (see code)
  interrupted,  ///< stopped by request_stop; temporary file removed
};

/// Returns "done", "redone", "skipped", "missing", "failed", "interrupted".
const char* status_name(FileStatus status);

/// The outcome of one step of a date.
struct StepResult {
  Date date;
  StepPlan step;
  FileStatus status = FileStatus::done;  ///< done, redone, skipped, failed
  /// failed: input (3: the source is unusable, or a problem such as a field
  /// missing from it that shows only when it is read) or output (4)
  ExitCode code = ExitCode::ok;
  std::string message;   ///< failed: one line naming file and problem
  double seconds = 0.0;  ///< wall time of the step
};

/// The outcome of one date.
struct FileResult {
  PlanItem item;
  FileStatus status = FileStatus::done;
  ExitCode code = ExitCode::ok;  ///< failed: input (3, also missing input) or output (4)
  std::string message;           ///< failed/interrupted: one line naming file and problem
  double seconds = 0.0;          ///< wall time of the computation
  CurrentsSummary summary;       ///< done/redone only
};

/// Receives progress of run_plan (the command line prints from it).
class RunObserver {
 public:
  virtual ~RunObserver() = default;
  /// Before date INDEX (0-based) of TOTAL is looked at.
  virtual void file_started(const PlanItem& /*item*/, std::size_t /*index*/,
                            std::size_t /*total*/) {}
  /// After each row band written by run_currents.
  virtual void band_done() {}
  /// After date INDEX is finished (before its steps).
  virtual void file_finished(const FileResult& /*result*/, std::size_t /*index*/,
                             std::size_t /*total*/) {}
  /// After each step of a date.
  virtual void step_finished(const StepResult& /*result*/) {}
};

/// Settings of one run besides the job file.
struct RunSettings {
  bool force = false;        ///< --force: redo complete outputs (decided in make_plan)
  std::string command_line;  ///< for the outputs' history attribute
  std::string log_json;      ///< append JSON lines here ("" = none)
};

/// Counts of a finished run.
struct RunTotals {
  std::size_t done = 0, redone = 0, skipped = 0, missing_ok = 0;
  std::size_t failed_input = 0;   ///< missing or unusable inputs, other per-file errors
  std::size_t failed_output = 0;  ///< outputs that could not be written
  /// Steps: made (absent before), remade, skipped as complete, failed on their
  /// source (or a problem found when reading it), failed on the output.
  std::size_t steps_done = 0, steps_redone = 0, steps_skipped = 0;
  std::size_t steps_failed_input = 0, steps_failed_output = 0;
  int stop_signal = 0;  ///< signal that stopped the run, or 0
  double seconds = 0.0;

  /// 128 + signal when stopped; 4 if an output (of a day or a step) could
  /// not be written; 5 if an input (of a day or a step) failed; 0 otherwise.
  [[nodiscard]] int exit_code() const;
};

/// Formats one JSON log line (with '\n') of RESULT for job JOB_NAME, ended at
/// TIME_ISO: {"time", "job", "date", "input", "output", "status", "seconds",
/// "steps", "cells", "flagged_share", "message"} (numbers null when the file
/// was not computed; message null unless failed/interrupted).
std::string json_log_line(const FileResult& result, const std::string& job_name,
                          const std::string& time_iso);

/// Formats one JSON log line (with '\n') of step RESULT: {"time", "job",
/// "date", "step" ("quicklook"/"section"), "step_index" (1-based within its
/// kind), "input" (the file read), "output", "status", "seconds" (null when
/// skipped), "message" (null unless failed)}.
std::string json_step_line(const StepResult& result, const std::string& job_name,
                           const std::string& time_iso);

/// Runs PLAN in order: skips what make_plan found complete, computes the
/// rest with run_currents (creating output folders when the job says so;
/// replacing an incomplete output atomically), then, once the day's output
/// is complete, its steps (complete ones skipped; folders created like the
/// output's; each written to a temporary file and renamed), and stops
/// before the next file, row band or step once request_stop was called (the
/// current temporary file is removed; a step already running finishes).
/// Every per-file and per-step error is caught and counted, none is thrown.
/// Appends a JSON line per date and per step to SETTINGS.log_json. Throws
/// only OutputError when the log cannot be opened (before any file is
/// touched).
RunTotals run_plan(const JobFile& job, const std::vector<PlanItem>& plan,
                   const RunSettings& settings, RunObserver& observer);

}  // namespace seatilt
