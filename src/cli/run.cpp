// `seatilt run`: run a TOML job for a day, a range of days or a catch-up
// window, unattended (cron, systemd timers). Prints one line per date on
// stderr, a progress line only on a terminal, a summary at the end; maps the
// outcome to exit codes (docs/run.md). The work itself is in jobs.hpp.
#include <omp.h>
#include <signal.h>
#include <unistd.h>

#include <chrono>
#include <cstdio>
#include <optional>
#include <string>
#include <vector>

#include "cli.hpp"
#include "seatilt/error.hpp"
#include "seatilt/jobs.hpp"

namespace seatilt::cli {
namespace {

struct RunArgs {
  std::string job;
  std::string date, from, to;
  int catch_up = 0;
  bool dry_run = false;
  bool force = false;
  bool quiet = false;
  std::string log_json;
  CLI::Option* catch_up_option = nullptr;
} rargs;

std::optional<Date> date_option(const std::string& value, const char* option) {
  if (value.empty()) return std::nullopt;
  const std::optional<Date> d = parse_date(value);
  if (!d) throw UsageError(std::string(option) + ": '" + value + "' is not a date YYYY-MM-DD");
  return d;
}

// First SIGINT/SIGTERM/SIGHUP: ask the loop to stop cleanly (it removes the
// temporary file of the current output). A second one: the default action,
// at once (the next run removes the temporary file left behind).
void on_stop_signal(int signo) {
  if (stop_signal() != 0) {
    ::signal(signo, SIG_DFL);
    ::raise(signo);
    return;
  }
  request_stop(signo);
}

void install_stop_handlers() {
  struct sigaction sa {};
  sa.sa_handler = on_stop_signal;
  sigemptyset(&sa.sa_mask);
  sa.sa_flags = SA_RESTART;  // netCDF/HDF5 system calls resume after the handler
  for (int s : {SIGINT, SIGTERM, SIGHUP}) {
    // A signal ignored by the parent stays ignored (nohup, background jobs of
    // a non-interactive shell), as POSIX utilities do.
    struct sigaction old {};
    if (::sigaction(s, nullptr, &old) == 0 && old.sa_handler == SIG_IGN) continue;
    ::sigaction(s, &sa, nullptr);
  }
}

const char* signal_name(int s) {
  switch (s) {
    case SIGINT:
      return "SIGINT";
    case SIGTERM:
      return "SIGTERM";
    case SIGHUP:
      return "SIGHUP";
    default:
      return "a signal";
  }
}

std::string file_name(const std::string& path) { return path.substr(path.find_last_of('/') + 1); }

/// Human lines on stderr; a progress line when stderr is a terminal.
class ConsoleObserver : public RunObserver {
 public:
  ConsoleObserver(bool quiet, bool terminal) : quiet_(quiet), terminal_(terminal) {}

  void file_started(const PlanItem& item, std::size_t index, std::size_t total) override {
    computing_ = item.action == PlanAction::run || item.action == PlanAction::redo;
    if (!terminal_ || !computing_) return;
    label_ = "[" + std::to_string(index + 1) + "/" + std::to_string(total) + "] " +
             item.date.iso() + " " + file_name(item.output);
    bands_ = 0;
    draw(true);
  }

  void band_done() override {
    if (!terminal_ || !computing_) return;
    ++bands_;
    draw(false);
  }

  void file_finished(const FileResult& r, std::size_t, std::size_t) override {
    clear();
    const std::string date = r.item.date.iso();
    switch (r.status) {
      case FileStatus::done:
      case FileStatus::redone: {
        if (quiet_) break;
        const double share = r.summary.cells > 0 ? 100.0 * static_cast<double>(r.summary.flagged) /
                                                       static_cast<double>(r.summary.cells)
                                                 : 0.0;
        char buf[160];
        std::snprintf(buf, sizeof buf, "%zu step(s), %zu cells, %.1f %% flagged, %.1f s",
                      r.summary.steps, r.summary.cells, share, r.seconds);
        const char* what = r.status == FileStatus::done          ? "done"
                           : r.item.was == OutputState::complete ? "redone (--force)"
                                                                 : "redone (was incomplete)";
        line(date + " " + what + ": " + r.item.output + " (" + buf + ")");
        break;
      }
      case FileStatus::skipped:
        if (!quiet_) line(date + " skipped: " + r.item.output + " is complete");
        break;
      case FileStatus::missing_ok:
        if (!quiet_)
          line(date + " no input: " + r.item.input +
               " does not exist (allowed: missing_input = \"skip\")");
        break;
      case FileStatus::failed:
      case FileStatus::interrupted:
        print_error(r.message + " (date " + date + ")");
        break;
    }
  }

  void step_finished(const StepResult& r) override {
    clear();
    const std::string what =
        std::string(step_name(r.step.kind)) + " " + std::to_string(r.step.index + 1);
    const std::string date = r.date.iso();
    switch (r.status) {
      case FileStatus::done:
      case FileStatus::redone: {
        if (quiet_) break;
        char secs[32];
        std::snprintf(secs, sizeof secs, "%.1f s", r.seconds);
        line(date + " " + what + (r.status == FileStatus::done ? " done: " : " redone: ") +
             r.step.output + " (" + secs + ")");
        break;
      }
      case FileStatus::skipped:
        if (!quiet_) line(date + " " + what + " skipped: " + r.step.output + " is complete");
        break;
      default:
        print_error(r.message + " (date " + date + ", " + what + ")");
        break;
    }
  }

  void clear() {
    if (drawn_) {
      std::fputs("\r\033[K", stderr);
      drawn_ = false;
    }
  }

 private:
  void line(const std::string& text) { std::fprintf(stderr, "seatilt: %s\n", text.c_str()); }

  void draw(bool now) {
    const auto t = std::chrono::steady_clock::now();
    if (!now && t - last_ < std::chrono::milliseconds(200)) return;
    last_ = t;
    std::fprintf(stderr, "\r\033[Kseatilt: %s  band %zu", label_.c_str(), bands_);
    std::fflush(stderr);
    drawn_ = true;
  }

  bool quiet_, terminal_;
  bool drawn_ = false;
  bool computing_ = false;
  std::string label_;
  std::size_t bands_ = 0;
  std::chrono::steady_clock::time_point last_{};
};

std::string summary_text(const JobFile& job, std::size_t dates, const RunTotals& t) {
  std::string s = "job " + job.name + ": " + std::to_string(dates) + " date(s): ";
  std::string parts;
  auto part = [&](std::size_t n, const char* what) {
    if (n == 0) return;
    parts += (parts.empty() ? "" : ", ") + std::to_string(n) + " " + what;
  };
  part(t.done, "done");
  part(t.redone, "redone");
  part(t.skipped, "skipped (complete)");
  part(t.missing_ok, "without input (allowed)");
  part(t.failed_input, "failed (input)");
  part(t.failed_output, "failed (output not written)");
  std::string steps;
  auto step_part = [&](std::size_t n, const char* what) {
    if (n == 0) return;
    steps += (steps.empty() ? "" : ", ") + std::to_string(n) + " " + what;
  };
  step_part(t.steps_done, "done");
  step_part(t.steps_redone, "redone");
  step_part(t.steps_skipped, "skipped (complete)");
  step_part(t.steps_failed_input, "failed (input)");
  step_part(t.steps_failed_output, "failed (output not written)");
  if (!steps.empty()) parts += (parts.empty() ? "" : "; ") + std::string("steps: ") + steps;
  const std::size_t finished =
      t.done + t.redone + t.skipped + t.missing_ok + t.failed_input + t.failed_output;
  if (t.stop_signal != 0)
    parts += (parts.empty() ? "" : ", ") + std::string("stopped by ") + signal_name(t.stop_signal) +
             " with " + std::to_string(dates - finished) + " not done";
  char secs[32];
  std::snprintf(secs, sizeof secs, " in %.1f s", t.seconds);
  return s + (parts.empty() ? "nothing" : parts) + secs;
}

CLI::App* add_run(CLI::App& app) {
  CLI::App* c = app.add_subcommand(
      "run", "run a TOML job file for a day, a date range or the last N days (for cron/systemd)");
  c->fallthrough();
  c->add_option("job", rargs.job, "job file (TOML), see docs/run.md")->required();
  c->add_option("--date", rargs.date,
                "newest day to process, YYYY-MM-DD (default: today UTC minus dates.lag_days)");
  c->add_option("--from", rargs.from, "first day of a range, YYYY-MM-DD");
  c->add_option("--to", rargs.to,
                "last day of the range (default: today UTC minus dates.lag_days)");
  rargs.catch_up_option =
      c->add_option("--catch-up", rargs.catch_up,
                    "process the N days ending at --date (overrides dates.catch_up_days)");
  c->add_flag("--dry-run", rargs.dry_run, "print the plan (one line per day) on stdout and stop");
  c->add_flag("--force", rargs.force, "recompute outputs that are already complete");
  c->add_flag("--quiet", rargs.quiet, "print only failures (and the summary when any)");
  c->add_option("--log-json", rargs.log_json,
                "append one JSON line per day to FILE (overrides log_json)");
  return c;
}

int run_run_command() {
  install_stop_handlers();
  const JobFile job = load_job(rargs.job);

  DateRequest rq;
  rq.date = date_option(rargs.date, "--date");
  rq.from = date_option(rargs.from, "--from");
  rq.to = date_option(rargs.to, "--to");
  if (rargs.catch_up_option->count() > 0) rq.catch_up_days = rargs.catch_up;
  rq.today = today_utc();
  const std::vector<Date> dates = job_dates(job, rq);
  if (job.threads > 0) omp_set_num_threads(job.threads);

  if (rargs.dry_run) {
    for (const PlanItem& it : make_plan(job, dates, rargs.force)) {
      char act[16];
      std::snprintf(act, sizeof act, "%-10s", action_name(it.action));
      // Steps follow on the same line ("  + quicklook 1 run -> PNG"), so that
      // each day stays one line for scripts.
      std::string steps;
      for (const StepPlan& p : it.steps)
        steps += std::string("  + ") + step_name(p.kind) + " " + std::to_string(p.index + 1) + " " +
                 action_name(p.action) + " -> " + p.output;
      std::printf("%s  %s  %s -> %s%s\n", it.date.iso().c_str(), act, it.input.c_str(),
                  it.output.c_str(), steps.c_str());
    }
    return 0;
  }
  if (dates.empty()) {
    if (!rargs.quiet)
      std::fprintf(stderr, "seatilt: job %s: no dates yet (dates.from is after %s)\n",
                   job.name.c_str(), rq.today.plus(-job.lag_days).iso().c_str());
    return 0;
  }

  const JobLock lock(job.lock_file, job.path);
  const std::vector<PlanItem> plan = make_plan(job, dates, rargs.force);
  for (const std::string& f : remove_stale_temporaries(plan))
    if (!rargs.quiet)
      std::fprintf(stderr, "seatilt: removed %s (temporary file of a run that died)\n", f.c_str());

  RunSettings settings;
  settings.force = rargs.force;
  settings.command_line = command_line();
  settings.log_json = rargs.log_json.empty() ? job.log_json : rargs.log_json;
  ConsoleObserver observer(rargs.quiet, isatty(STDERR_FILENO) != 0);
  const RunTotals totals = run_plan(job, plan, settings, observer);
  observer.clear();
  const int code = totals.exit_code();
  if (!rargs.quiet || code != 0)
    std::fprintf(stderr, "seatilt: %s\n", summary_text(job, plan.size(), totals).c_str());
  return code;
}

}  // namespace

const bool registered_run = register_command({"run", add_run, run_run_command});

}  // namespace seatilt::cli
