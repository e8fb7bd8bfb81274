#include <doctest/doctest.h>
#include <fcntl.h>
#include <netcdf.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cmath>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <functional>
#include <string>
#include <vector>

#include "seatilt/error.hpp"
#include "seatilt/jobs.hpp"

using namespace seatilt;
namespace fs = std::filesystem;

namespace {

void nc_ok(int status) { REQUIRE_MESSAGE(status == NC_NOERR, nc_strerror(status)); }

struct TempDir {
  fs::path path;
  TempDir() {
    char tmpl[] = "/tmp/seatilt-test-jobs-XXXXXX";
    path = mkdtemp(tmpl);
  }
  ~TempDir() { fs::remove_all(path); }
  [[nodiscard]] std::string operator/(const std::string& name) const {
    return (path / name).string();
  }
};

void write_text(const std::string& path, const std::string& text) {
  std::ofstream(path, std::ios::binary) << text;
}

// Writes a small (lat, lon) float height file: a Gaussian bump of 0.2 m at
// 40N 20E, radius 150 km, on 36..44N, 15..25E at 0.1 degree.
void make_input(const std::string& path) {
  const std::size_t ny = 81, nx = 101;
  int nc = 0, dy = 0, dx = 0, vy = 0, vx = 0, vh = 0;
  nc_ok(nc_create(path.c_str(), NC_NETCDF4 | NC_CLOBBER, &nc));
  nc_ok(nc_def_dim(nc, "lat", ny, &dy));
  nc_ok(nc_def_dim(nc, "lon", nx, &dx));
  nc_ok(nc_def_var(nc, "lat", NC_DOUBLE, 1, &dy, &vy));
  nc_ok(nc_put_att_text(nc, vy, "units", 13, "degrees_north"));
  nc_ok(nc_def_var(nc, "lon", NC_DOUBLE, 1, &dx, &vx));
  nc_ok(nc_put_att_text(nc, vx, "units", 12, "degrees_east"));
  const int dims[2] = {dy, dx};
  nc_ok(nc_def_var(nc, "adt", NC_FLOAT, 2, dims, &vh));
  const std::string sn = "sea_surface_height_above_geoid";
  nc_ok(nc_put_att_text(nc, vh, "standard_name", sn.size(), sn.c_str()));
  nc_ok(nc_put_att_text(nc, vh, "units", 1, "m"));
  nc_ok(nc_enddef(nc));
  std::vector<double> lat(ny), lon(nx);
  for (std::size_t j = 0; j < ny; ++j) lat[j] = 36.0 + 0.1 * static_cast<double>(j);
  for (std::size_t i = 0; i < nx; ++i) lon[i] = 15.0 + 0.1 * static_cast<double>(i);
  nc_ok(nc_put_var_double(nc, vy, lat.data()));
  nc_ok(nc_put_var_double(nc, vx, lon.data()));
  std::vector<float> h(ny * nx);
  for (std::size_t j = 0; j < ny; ++j)
    for (std::size_t i = 0; i < nx; ++i) {
      const double dy_km = (lat[j] - 40.0) * 111.2, dx_km = (lon[i] - 20.0) * 85.2;
      h[j * nx + i] =
          static_cast<float>(0.2 * std::exp(-(dx_km * dx_km + dy_km * dy_km) / 22500.0));
    }
  nc_ok(nc_put_var_float(nc, vh, h.data()));
  nc_ok(nc_close(nc));
}

// A netCDF file with (or without) the completion marker.
void make_marked(const std::string& path, const char* status) {
  int nc = 0;
  nc_ok(nc_create(path.c_str(), NC_NETCDF4 | NC_CLOBBER, &nc));
  if (status) nc_ok(nc_put_att_text(nc, NC_GLOBAL, "seatilt_status", std::strlen(status), status));
  nc_ok(nc_close(nc));
}

std::string error_of(const std::function<void()>& f) {
  try {
    f();
  } catch (const UsageError& e) {
    return e.what();
  }
  return "(no UsageError)";
}

std::string job_error(const std::string& text) {
  return error_of([&] { parse_job(text, "/srv/jobs/j.toml"); });
}

Date D(int y, int m, int d) { return Date{y, m, d}; }

const std::string minimal = "input = \"in/%Y%m%d.nc\"\noutput = \"out/%Y/uv_%Y%m%d.nc\"\n";

}  // namespace

TEST_CASE("dates: day numbers and the Gregorian leap rule") {
  // POSIX epoch: 1970-01-01 is day 0; 2000-01-01T00:00:00Z = 946684800 s
  // = 10957 days (POSIX time, IEEE Std 1003.1 "Seconds Since the Epoch").
  CHECK(D(1970, 1, 1).days() == 0);
  CHECK(D(2000, 1, 1).days() == 10957);
  CHECK(D(1969, 12, 31).days() == -1);
  // Gregorian rule: 2000 leap (divisible by 400), 1900 and 2100 not.
  CHECK(D(2000, 3, 1).days() - D(2000, 2, 28).days() == 2);
  CHECK(D(2100, 3, 1).days() - D(2100, 2, 28).days() == 1);
  CHECK(D(1900, 3, 1).days() - D(1900, 2, 28).days() == 1);
  // from_days inverts days() over 1600..2400 (checked against stepping by one day).
  Date d = D(1600, 1, 1);
  for (std::int64_t k = D(1600, 1, 1).days(); k < D(2400, 1, 1).days(); ++k) {
    const Date e = Date::from_days(k);
    REQUIRE(e == d);
    REQUIRE(e.days() == k);
    // next day by hand
    const int mdays[] = {31, (e.year % 4 == 0 && e.year % 100 != 0) || e.year % 400 == 0 ? 29 : 28,
                         31, 30,
                         31, 30,
                         31, 31,
                         30, 31,
                         30, 31};
    if (++d.day > mdays[d.month - 1]) {
      d.day = 1;
      if (++d.month > 12) {
        d.month = 1;
        ++d.year;
      }
    }
  }
  CHECK(D(2031, 12, 31).plus(1) == D(2032, 1, 1));
  CHECK(D(2032, 3, 1).plus(-1) == D(2032, 2, 29));
}

TEST_CASE("dates: parse_date accepts only real YYYY-MM-DD days") {
  CHECK(parse_date("2032-02-29") == std::optional<Date>(D(2032, 2, 29)));
  CHECK_FALSE(parse_date("2031-02-29"));
  CHECK_FALSE(parse_date("2031-9-1"));
  CHECK_FALSE(parse_date("2031-13-01"));
  CHECK_FALSE(parse_date("2031-04-31"));
  CHECK_FALSE(parse_date("0000-01-01"));
  CHECK_FALSE(parse_date("yesterday"));
  CHECK(parse_date("2031-09-03")->iso() == "2031-09-03");
}

TEST_CASE("templates: strftime fields on a UTC day") {
  // 2024 is a leap year, so 31 December is day 366 (Gregorian rule).
  CHECK(PathTemplate("/d/%Y/%m/x_%Y%m%d_%j.nc").expand(D(2024, 12, 31)) ==
        "/d/2024/12/x_20241231_366.nc");
  // ISO 8601 week date: 2008-12-29 is 2009-W01-1 (ISO 8601:2004 week rules,
  // Monday of the week with the year's first Thursday; from memory).
  CHECK(PathTemplate("%G-W%V-%u").expand(D(2008, 12, 29)) == "2009-W01-1");
  // 2000-01-01 was a Saturday (POSIX day 10957, 1970-01-01 a Thursday).
  CHECK(PathTemplate("%a %A %w %b %B %y %C %F").expand(D(2000, 1, 1)) ==
        "Sat Saturday 6 Jan January 00 20 2000-01-01");
  CHECK(PathTemplate("t%H%M%S_%%_%d").expand(D(2031, 9, 3)) == "t000000_%_03");
  CHECK(PathTemplate("a_%Y.nc").has_date_fields());
  CHECK_FALSE(PathTemplate("latest_%H.nc").has_date_fields());
  // A long expansion (strftime buffer growth).
  std::string many;
  for (int k = 0; k < 200; ++k) many += "%B";
  CHECK(PathTemplate(many).expand(D(2031, 9, 3)).size() == 200 * 9);
}

TEST_CASE("templates: unknown fields and a lone % are refused with their position") {
  CHECK(error_of([] { PathTemplate("in_%Y%Q.nc"); }).find("unknown date field %Q at character 6") !=
        std::string::npos);
  CHECK(error_of([] { PathTemplate("in_%Y%"); }).find("lone %") != std::string::npos);
  CHECK(error_of([] { PathTemplate("%Ey"); }).find("%E") != std::string::npos);
  CHECK(error_of([] { PathTemplate(""); }).find("empty") != std::string::npos);
}

TEST_CASE("job file: a full file is read with every option") {
  const JobFile j = parse_job(R"(# Pelagora daily
name = "pelagora"
input = "/data/in/%Y/ssh_%Y%m%d.nc"
output = "uv/%Y/uv_%Y%m%d.nc"
make_folders = false
missing_input = "skip"
lock_file = "run/pelagora.lock"
log_json = "/var/log/p.jsonl"

[dates]
catch_up_days = 5
lag_days = 1

[currents]
variable = "adt"
units = "cm"
order = 4
equator = "mask"
equator_band = 3
coast = "mask"
earth = "sphere"
gravity = 9.81
fields = ["u", "v"]
deflate = 4
significant_digits = 3
threads = 2
rows = 64
memory_mb = 64
)",
                              "/srv/jobs/p.toml");
  CHECK(j.name == "pelagora");
  CHECK(j.folder == "/srv/jobs");
  CHECK(j.input.text() == "/data/in/%Y/ssh_%Y%m%d.nc");
  CHECK(j.output.text() == "/srv/jobs/uv/%Y/uv_%Y%m%d.nc");
  CHECK(j.output_line == 4);
  CHECK_FALSE(j.make_folders);
  CHECK(j.missing_input == MissingInput::skip);
  CHECK(j.lock_file == "/srv/jobs/run/pelagora.lock");
  CHECK(j.log_json == "/var/log/p.jsonl");
  CHECK(j.catch_up_days == std::optional<int>(5));
  CHECK(j.lag_days == 1);
  CHECK(j.reader.variable == "adt");
  CHECK(j.reader.units == "cm");
  CHECK(j.options.order == 4);
  CHECK(j.options.equator == EquatorMethod::mask);
  CHECK(j.options.equator_band_deg == 3.0);
  CHECK(j.options.coast == CoastMethod::mask);
  CHECK(j.options.earth == EarthModel::sphere);
  CHECK(j.options.gravity == GravityModel::constant);
  CHECK(j.options.gravity_value == 9.81);
  CHECK(j.fields == std::vector<std::string>{"u", "v", "quality"});
  CHECK(j.deflate == 4);
  CHECK(j.significant_digits == 3);
  CHECK(j.threads == 2);
  CHECK(j.rows == 64);
  CHECK(j.memory_mb == 64);
}

TEST_CASE("job file: defaults") {
  const JobFile j = parse_job(minimal, "/srv/jobs/daily.toml");
  CHECK(j.name == "daily");
  CHECK(j.lock_file == "/srv/jobs/daily.toml.lock");
  CHECK(j.make_folders);
  CHECK(j.missing_input == MissingInput::fail);
  CHECK(j.log_json.empty());
  CHECK_FALSE(j.catch_up_days);
  CHECK_FALSE(j.from);
  CHECK(j.options.order == 2);
  CHECK(j.options.equator == EquatorMethod::blend);
  CHECK(j.options.earth == EarthModel::wgs84);
  CHECK(j.options.gravity == GravityModel::standard);
  CHECK(j.fields.size() == 9);  // every field, quality last (README field table)
  CHECK(j.deflate == 1);
  CHECK(j.memory_mb == 256);
}

TEST_CASE("job file: every problem names file and line") {
  CHECK(job_error(minimal + "[currents]\nordr = 4\n") ==
        "/srv/jobs/j.toml:4: unknown key 'ordr' in [currents] (did you mean 'order'?); known: "
        "variable, units, order, equator, equator_band, coast, earth, gravity, fields, deflate, "
        "significant_digits, threads, rows, memory_mb");
  CHECK(job_error("\n" + minimal + "colour = 1\n")
            .rfind("/srv/jobs/j.toml:4: unknown key 'colour'", 0) == 0);
  CHECK(job_error(minimal + "[currents]\norder = 3\n") ==
        "/srv/jobs/j.toml:4: currents.order: 3 is not one of 2, 4, 6");
  CHECK(job_error(minimal + "[currents]\norder = \"4\"\n") ==
        "/srv/jobs/j.toml:4: currents.order: expected an integer, got a string");
  CHECK(job_error(minimal + "[currents]\nequator = \"wide\"\n") ==
        "/srv/jobs/j.toml:4: currents.equator: 'wide' is not one of mask, beta, blend");
  CHECK(job_error(minimal + "[currents]\nequator_band = 40\n")
            .rfind("/srv/jobs/j.toml:4: currents.equator_band: 40", 0) == 0);
  CHECK(job_error(minimal + "[currents]\ngravity = 1000\n")
            .rfind("/srv/jobs/j.toml:4: currents.gravity: 1000", 0) == 0);
  CHECK(job_error(minimal + "[currents]\nfields = \"u,speeed\"\n")
            .rfind("/srv/jobs/j.toml:4: currents.fields: unknown field 'speeed'", 0) == 0);
  CHECK(job_error(minimal + "[currents]\ndeflate = 12\n") ==
        "/srv/jobs/j.toml:4: currents.deflate: 12 is outside 0..9");
  CHECK(job_error(minimal + "[currents]\nmemory_mb = 8\n") ==
        "/srv/jobs/j.toml:4: currents.memory_mb: 8 is outside 16..16777216");
  CHECK(job_error("input = \"a_%Y%m%d.nc\"\noutput = \"b_%Y%m%q.nc\"\n")
            .rfind("/srv/jobs/j.toml:2: output: template 'b_%Y%m%q.nc': unknown date field %q at "
                   "character 7",
                   0) == 0);
  CHECK(job_error("input = \"a.nc\"\noutput = \"b.nc\"\n")
            .rfind("/srv/jobs/j.toml:2: output: template 'b.nc' has no date field", 0) == 0);
  CHECK(job_error("input = \"a_%F.nc\"\n") ==
        "/srv/jobs/j.toml: missing key 'output' (a path template, e.g. \"uv/%Y/uv_%Y%m%d.nc\")");
  CHECK(job_error("input = \"a_%F.nc\"\noutput = \"a_%F.nc\"\n").find("same template as input") !=
        std::string::npos);
  CHECK(job_error(minimal + "missing_input = \"ignore\"\n") ==
        "/srv/jobs/j.toml:3: missing_input: 'ignore' is not one of fail, skip");
  CHECK(job_error(minimal + "[dates]\nfrom = 2031-09-05\nto = 2031-09-01\n") ==
        "/srv/jobs/j.toml:5: dates.to: 2031-09-01 is before dates.from 2031-09-05");
  CHECK(job_error(minimal + "[dates]\nfrom = 2031-09-05\ncatch_up_days = 3\n")
            .rfind("/srv/jobs/j.toml:5: dates.catch_up_days: use either", 0) == 0);
  CHECK(job_error(minimal + "[dates]\nto = \"2031-09-05\"\n") ==
        "/srv/jobs/j.toml:4: dates.to: needs dates.from");
  CHECK(job_error(minimal + "[dates]\nfrom = \"2031-02-30\"\n") ==
        "/srv/jobs/j.toml:4: dates.from: '2031-02-30' is not a date YYYY-MM-DD");
  CHECK(job_error(minimal + "[dates]\ncatch_up_days = 0\n") ==
        "/srv/jobs/j.toml:4: dates.catch_up_days: 0 is outside 1..36600");
  // TOML syntax errors keep toml++'s position.
  CHECK(job_error(minimal + "order = = 4\n").rfind("/srv/jobs/j.toml:3: ", 0) == 0);
  CHECK(job_error(minimal + "currents = 4\n") ==
        "/srv/jobs/j.toml:3: currents: expected a table [currents], got an integer");
}

TEST_CASE("job file: load_job reads a file and says when it cannot") {
  TempDir tmp;
  write_text(tmp / "a.toml", minimal);
  const JobFile j = load_job(tmp / "a.toml");
  CHECK(j.output.text() == tmp / "out/%Y/uv_%Y%m%d.nc");
  CHECK(error_of([&] { load_job(tmp / "absent.toml"); }).find("cannot read job file") !=
        std::string::npos);
}

TEST_CASE("dates of a run: command line over file, catch-up, lag, ranges") {
  JobFile j = parse_job(minimal, "/j.toml");
  DateRequest rq;
  rq.today = D(2031, 9, 3);
  using V = std::vector<Date>;
  CHECK(job_dates(j, rq) == V{D(2031, 9, 3)});
  j.lag_days = 1;
  CHECK(job_dates(j, rq) == V{D(2031, 9, 2)});
  j.catch_up_days = 3;
  CHECK(job_dates(j, rq) == V{D(2031, 8, 31), D(2031, 9, 1), D(2031, 9, 2)});
  rq.date = D(2032, 1, 1);  // window ends at --date, no lag
  CHECK(job_dates(j, rq) == V{D(2031, 12, 30), D(2031, 12, 31), D(2032, 1, 1)});
  rq.catch_up_days = 1;
  CHECK(job_dates(j, rq) == V{D(2032, 1, 1)});
  rq = DateRequest{};
  rq.today = D(2031, 9, 3);
  rq.from = D(2032, 2, 28);
  rq.to = D(2032, 3, 1);
  CHECK(job_dates(j, rq) == V{D(2032, 2, 28), D(2032, 2, 29), D(2032, 3, 1)});
  rq.to.reset();
  CHECK(job_dates(j, rq).empty());  // from after today - lag: not started yet
  rq.from = D(2031, 9, 1);
  CHECK(job_dates(j, rq) == V{D(2031, 9, 1), D(2031, 9, 2)});
  rq.to = D(2031, 8, 1);
  CHECK(error_of([&] { job_dates(j, rq); }).find("is after the end") != std::string::npos);
  rq.from.reset();
  CHECK(error_of([&] { job_dates(j, rq); }) == "--to: needs --from (or use --date)");
  rq = DateRequest{};
  rq.today = D(2031, 9, 3);
  rq.catch_up_days = 0;
  CHECK(error_of([&] { job_dates(j, rq); }).find("outside 1..36600") != std::string::npos);
  // File range; to defaults to today - lag.
  JobFile k = parse_job(minimal + "[dates]\nfrom = 2031-08-30\n", "/j.toml");
  rq = DateRequest{};
  rq.today = D(2031, 9, 1);
  CHECK(job_dates(k, rq) == V{D(2031, 8, 30), D(2031, 8, 31), D(2031, 9, 1)});
}

TEST_CASE("output state: absent, complete only with the marker") {
  TempDir tmp;
  CHECK(output_state(tmp / "none.nc") == OutputState::absent);
  make_marked(tmp / "done.nc", "complete");
  CHECK(output_state(tmp / "done.nc") == OutputState::complete);
  make_marked(tmp / "plain.nc", nullptr);
  CHECK(output_state(tmp / "plain.nc") == OutputState::incomplete);
  make_marked(tmp / "other.nc", "writing");
  CHECK(output_state(tmp / "other.nc") == OutputState::incomplete);
  write_text(tmp / "garbage.nc", "CDF\x01 this is not a netCDF file");
  CHECK(output_state(tmp / "garbage.nc") == OutputState::incomplete);
  // A complete file cut in half (a torn copy) is not complete.
  {
    std::ifstream in(tmp / "done.nc", std::ios::binary);
    std::string all((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
    write_text(tmp / "torn.nc", all.substr(0, all.size() / 2));
  }
  CHECK(output_state(tmp / "torn.nc") == OutputState::incomplete);
  fs::create_directory(tmp / "folder.nc");
  CHECK(output_state(tmp / "folder.nc") == OutputState::incomplete);
}

TEST_CASE("plan: skip complete, redo incomplete, missing inputs, duplicate outputs") {
  TempDir tmp;
  write_text(tmp / "job.toml", "input = \"in_%d.nc\"\noutput = \"out_%d.nc\"\n");
  JobFile j = load_job(tmp / "job.toml");
  make_input(tmp / "in_01.nc");
  make_input(tmp / "in_02.nc");
  make_input(tmp / "in_03.nc");
  make_marked(tmp / "out_02.nc", "complete");
  make_marked(tmp / "out_03.nc", nullptr);
  const std::vector<Date> days = {D(2031, 9, 1), D(2031, 9, 2), D(2031, 9, 3), D(2031, 9, 4)};
  auto plan = make_plan(j, days, false);
  REQUIRE(plan.size() == 4);
  CHECK(plan[0].action == PlanAction::run);
  CHECK(plan[0].input == tmp / "in_01.nc");
  CHECK(plan[0].output == tmp / "out_01.nc");
  CHECK(plan[1].action == PlanAction::skip);
  CHECK(plan[2].action == PlanAction::redo);
  CHECK(plan[2].was == OutputState::incomplete);
  CHECK(plan[3].action == PlanAction::missing);
  plan = make_plan(j, days, true);
  CHECK(plan[1].action == PlanAction::redo);
  j.missing_input = MissingInput::skip;
  CHECK(make_plan(j, days, false)[3].action == PlanAction::missing_ok);
  // %d repeats after a month.
  CHECK(error_of([&] {
          make_plan(j, {D(2031, 9, 1), D(2031, 10, 1)}, false);
        }) == tmp / "job.toml" + ":2: output: template '" + tmp / "out_%d.nc" +
                  "' gives one file for 2031-09-01 and 2031-10-01: " + tmp / "out_01.nc" +
                  " (add a day field such as %d or %j)");
}

TEST_CASE("stale temporaries: only those of this plan's outputs whose process is gone") {
  TempDir tmp;
  const pid_t child = fork();
  if (child == 0) _exit(0);
  int st = 0;
  waitpid(child, &st, 0);  // CHILD is now a pid without a process
  const std::string dead = std::to_string(child), self = std::to_string(getpid());
  write_text(tmp / (".out_01.nc.tmp-" + dead + "-0123abcd"), "x");
  write_text(tmp / (".out_01.nc.tmp-" + self + "-0123abcd"), "x");
  write_text(tmp / (".other.nc.tmp-" + dead + "-0123abcd"), "x");
  write_text(tmp / (".out_01.nc.tmp-" + dead + "-notahex!"), "x");
  PlanItem it;
  it.output = tmp / "out_01.nc";
  const auto removed = remove_stale_temporaries({it});
  CHECK(removed == std::vector<std::string>{tmp / (".out_01.nc.tmp-" + dead + "-0123abcd")});
  CHECK(fs::exists(tmp / (".out_01.nc.tmp-" + self + "-0123abcd")));
  CHECK(fs::exists(tmp / (".other.nc.tmp-" + dead + "-0123abcd")));
  CHECK(fs::exists(tmp / (".out_01.nc.tmp-" + dead + "-notahex!")));
}

TEST_CASE("lock: a second holder is refused with the first one's pid; released on destruction") {
  TempDir tmp;
  const std::string lock = tmp / "j.toml.lock";
  {
    JobLock first(lock, "j.toml");
    // flock locks belong to the open file description, so a second open in
    // this process conflicts like another process would (flock(2)).
    std::string msg;
    int code = 0;
    try {
      JobLock second(lock, "j.toml");
    } catch (const LockBusy& e) {
      msg = e.what();
      code = static_cast<int>(e.code());
    }
    CHECK(code == 75);  // EX_TEMPFAIL, BSD sysexits.h
    CHECK(msg.rfind("j.toml: another run holds the lock " + lock + " (pid " +
                        std::to_string(getpid()) + ", started ",
                    0) == 0);
    CHECK(msg.find("try again later") != std::string::npos);
  }
  CHECK_NOTHROW(JobLock(lock, "j.toml"));
  std::string err;
  try {
    JobLock nowhere(tmp / "no/such/folder/x.lock", "j.toml");
  } catch (const OutputError& e) {
    err = e.what();
  }
  CHECK(err.find("cannot open lock file") != std::string::npos);
}

TEST_CASE("JSON log lines") {
  FileResult r;
  r.item.date = D(2031, 9, 3);
  r.item.input = "/in/a \"b\".nc";
  r.item.output = "/out/c.nc";
  r.status = FileStatus::done;
  r.seconds = 1.5;
  r.summary.steps = 2;
  r.summary.cells = 200;
  r.summary.flagged = 50;
  CHECK(json_log_line(r, "job", "2031-09-03T04:00:00Z") ==
        "{\"time\": \"2031-09-03T04:00:00Z\", \"job\": \"job\", \"date\": \"2031-09-03\", "
        "\"input\": \"/in/a \\\"b\\\".nc\", \"output\": \"/out/c.nc\", \"status\": \"done\", "
        "\"seconds\": 1.500, \"steps\": 2, \"cells\": 200, \"flagged_share\": 0.25, "
        "\"message\": null}\n");
  r.status = FileStatus::failed;
  r.message = "bad\nthing";
  CHECK(json_log_line(r, "job", "T")
            .find("\"seconds\": null, \"steps\": null, \"cells\": null, "
                  "\"flagged_share\": null, \"message\": \"bad\\nthing\"}") != std::string::npos);
}

namespace {
struct Counter : RunObserver {
  std::size_t bands = 0, started = 0, finished = 0;
  bool stop_at_first_band = false;
  std::vector<FileStatus> statuses;
  void file_started(const PlanItem&, std::size_t, std::size_t) override { ++started; }
  void band_done() override {
    ++bands;
    if (stop_at_first_band) request_stop(15);
  }
  void file_finished(const FileResult& r, std::size_t, std::size_t) override {
    ++finished;
    statuses.push_back(r.status);
  }
};
}  // namespace

TEST_CASE("run_plan: done, skipped, failed; rerun skips; exit codes") {
  clear_stop();
  TempDir tmp;
  write_text(tmp / "job.toml",
             "input = \"in_%d.nc\"\noutput = \"out/%m/uv_%d.nc\"\n[currents]\nrows = 16\n");
  const JobFile j = load_job(tmp / "job.toml");
  make_input(tmp / "in_01.nc");
  write_text(tmp / "in_02.nc", "not netCDF");
  const std::vector<Date> days = {D(2031, 9, 1), D(2031, 9, 2), D(2031, 9, 3)};
  Counter c;
  RunSettings rs;
  rs.log_json = tmp / "log.jsonl";
  RunTotals t = run_plan(j, make_plan(j, days, false), rs, c);
  CHECK(t.done == 1);
  CHECK(t.failed_input == 2);  // unreadable and missing
  CHECK(t.exit_code() == 5);
  CHECK(c.bands >= 6);  // 81 rows in bands of 16
  CHECK(output_state(tmp / "out/09/uv_01.nc") == OutputState::complete);
  CHECK_FALSE(fs::exists(tmp / "out/09/uv_02.nc"));
  // Rerun: the complete output is skipped.
  fs::remove(tmp / "in_02.nc");
  make_input(tmp / "in_02.nc");
  make_input(tmp / "in_03.nc");
  Counter c2;
  t = run_plan(j, make_plan(j, days, false), rs, c2);
  CHECK(t.skipped == 1);
  CHECK(t.done == 2);
  CHECK(t.exit_code() == 0);
  std::ifstream log(tmp / "log.jsonl");
  std::string line;
  std::size_t lines = 0;
  while (std::getline(log, line)) ++lines;
  CHECK(lines == 6);
}

TEST_CASE("run_plan: a stop request abandons the file, leaves nothing, exits 128+signal") {
  clear_stop();
  TempDir tmp;
  write_text(tmp / "job.toml", "input = \"in.nc\"\noutput = \"uv_%d.nc\"\n[currents]\nrows = 8\n");
  const JobFile j = load_job(tmp / "job.toml");
  make_input(tmp / "in.nc");
  Counter c;
  c.stop_at_first_band = true;
  const RunTotals t = run_plan(j, make_plan(j, {D(2031, 9, 1), D(2031, 9, 2)}, false), {}, c);
  CHECK(c.statuses == std::vector<FileStatus>{FileStatus::interrupted});
  CHECK(t.stop_signal == 15);
  CHECK(t.exit_code() == 128 + 15);
  for (const auto& e : fs::directory_iterator(tmp.path))
    CHECK(e.path().filename().string().find("uv_") == std::string::npos);
  clear_stop();
  CHECK(stop_signal() == 0);
}

// ---- steps: [[quicklook]] and [[section]] ---------------------------------------------------

TEST_CASE("job file: [[quicklook]] and [[section]] steps with every key") {
  TempDir tmp;
  write_text(tmp / "gates.toml",
             "[[section]]\nname = \"east gate\"\nline = \"20 38, 20 42\"\n"
             "[[section]]\nname = \"north gate\"\nline = \"16 43, 24 43\"\n");
  write_text(tmp / "job.toml", minimal + R"(
[currents]
earth = "sphere"
gravity = "wgs84"
equator_band = 3

[[quicklook]]
output = "maps/%Y/speed_%Y%m%d.png"
field = "speed"
arrows = true
region = [15, 25, 36.5, 44]
range = "0,0.5"
width = 1200
time = 0

[[quicklook]]
output = "maps/%Y/ssh_%Y%m%d.png"
source = "input"
region = "350,10,-5,5"

[[section]]
output = "sections/zonal_%Y%m%d.csv"
name = "zonal"
line = "16 40, 24 40"
spacing = 5
depth = 3500
sections = "gates.toml"

[[section]]
output = "sections/gates_%j.nc"
sections = "gates.toml"
earth = "wgs84"
gravity = 9.8
equator_band = 0
)");
  const JobFile j = load_job(tmp / "job.toml");
  REQUIRE(j.quicklooks.size() == 2);
  const QuicklookStep& q = j.quicklooks[0];
  CHECK(q.output.text() == tmp / "maps/%Y/speed_%Y%m%d.png");
  CHECK(q.line == 9);
  CHECK_FALSE(q.of_input);
  CHECK(q.request.field == "speed");
  CHECK(q.request.arrows);
  CHECK(q.options.arrows);
  REQUIRE(q.options.region);
  CHECK(q.options.region->lon0 == 15.0);
  CHECK(q.options.region->lat1 == 44.0);
  REQUIRE(q.options.range);
  CHECK(q.options.range->high == 0.5);
  CHECK(q.options.width_px == 1200);
  CHECK(j.quicklooks[1].of_input);
  CHECK(j.quicklooks[1].options.region->lon1 == 370.0);  // across the seam (parse_region)
  CHECK(j.quicklooks[1].options.width_px == 1000);       // the quicklook default
  CHECK(j.quicklooks[1].line == 18);
  REQUIRE(j.sections.size() == 2);
  const SectionStep& s = j.sections[0];
  CHECK(s.output.text() == tmp / "sections/zonal_%Y%m%d.csv");
  CHECK(s.line == 23);
  REQUIRE(s.sections.size() == 3);  // the line first, then the file's
  CHECK(s.sections[0].name == "zonal");
  CHECK(s.sections[0].points.size() == 2);
  CHECK(s.sections[1].name == "east gate");
  CHECK(s.sections[2].name == "north gate");
  CHECK(s.options.spacing_m == 5000.0);
  CHECK(s.options.depth_m == 3500.0);
  // Physics not given in [[section]] follow [currents].
  CHECK(s.options.earth == EarthModel::sphere);
  CHECK(s.options.gravity == GravityModel::wgs84);
  CHECK(s.options.equator_band_deg == 3.0);
  const SectionStep& g = j.sections[1];
  CHECK(g.sections.size() == 2);
  CHECK(g.options.earth == EarthModel::wgs84);
  CHECK(g.options.gravity == GravityModel::constant);
  CHECK(g.options.gravity_value == 9.8);
  CHECK(g.options.equator_band_deg == 0.0);
  CHECK(g.options.spacing_m == 0.0);  // about the grid spacing
  // A single [quicklook] table is one step too; no steps by default.
  CHECK(
      parse_job(minimal + "[quicklook]\noutput = \"m_%F.png\"\n", "/j/a.toml").quicklooks.size() ==
      1);
  CHECK(parse_job(minimal, "/j/a.toml").quicklooks.empty());
  CHECK(parse_job(minimal, "/j/a.toml").sections.empty());
}

TEST_CASE("job file: step problems name file and line") {
  const std::string q = minimal + "\n[[quicklook]]\noutput = \"m/%F.png\"\n";  // table on line 4
  CHECK(job_error(q + "feild = \"u\"\n") ==
        "/srv/jobs/j.toml:6: unknown key 'feild' in [[quicklook]] (did you mean 'field'?); known: "
        "output, source, field, time, region, range, arrows, width");
  CHECK(job_error(q + "width = 100\n") ==
        "/srv/jobs/j.toml:6: quicklook.width: 100 is outside 320..4096");
  CHECK(job_error(q + "region = \"1,2,3\"\n") ==
        "/srv/jobs/j.toml:6: quicklook.region: '1,2,3' is not LON0,LON1,LAT0,LAT1 in degrees");
  CHECK(job_error(q + "region = [1, 2, 3]\n") ==
        "/srv/jobs/j.toml:6: quicklook.region: expected a string or an array of 4 numbers, got an "
        "array of 3");
  CHECK(job_error(q + "region = [0, 10, 50, 40]\n") ==
        "/srv/jobs/j.toml:6: quicklook.region: LAT0 must be south of LAT1");
  CHECK(job_error(q + "range = [2, 1]\n") ==
        "/srv/jobs/j.toml:6: quicklook.range: A must be less than B");
  CHECK(job_error(q + "source = \"currents\"\n") ==
        "/srv/jobs/j.toml:6: quicklook.source: 'currents' is not one of output, input");
  CHECK(job_error(q + "source = \"input\"\narrows = true\n") ==
        "/srv/jobs/j.toml:7: quicklook.arrows: needs u and v from the day's output; not with "
        "source = \"input\"");
  CHECK(job_error(q + "time = -1\n") ==
        "/srv/jobs/j.toml:6: quicklook.time: -1 is outside 0..1073741824");
  CHECK(job_error(minimal + "\n[[quicklook]]\nfield = \"u\"\n") ==
        "/srv/jobs/j.toml:4: quicklook: missing key 'output' (a PNG path template, e.g. "
        "\"maps/%Y/speed_%Y%m%d.png\")");
  CHECK(job_error(minimal + "[[quicklook]]\noutput = \"map.png\"\n")
            .rfind("/srv/jobs/j.toml:4: quicklook.output: template 'map.png' has no date field",
                   0) == 0);
  CHECK(
      job_error(minimal + "[[quicklook]]\noutput = \"m_%Q.png\"\n")
          .rfind("/srv/jobs/j.toml:4: quicklook.output: template 'm_%Q.png': unknown date field %Q",
                 0) == 0);
  CHECK(job_error(minimal + "quicklook = 3\n") ==
        "/srv/jobs/j.toml:3: quicklook: expected [[quicklook]] tables, got an integer");

  const std::string s = minimal + "\n[[section]]\noutput = \"s/%F.csv\"\n";
  CHECK(job_error(s + "line = \"16 40, 24 40\"\nsapcing = 5\n") ==
        "/srv/jobs/j.toml:7: unknown key 'sapcing' in [[section]] (did you mean 'spacing'?); "
        "known: output, name, line, sections, spacing, depth, equator_band, earth, gravity");
  CHECK(job_error(s) ==
        "/srv/jobs/j.toml:4: section: needs line = \"LON LAT, LON LAT, ...\" or sections = "
        "\"FILE.toml\"");
  CHECK(job_error(s + "line = \"16 40\"\n").rfind("/srv/jobs/j.toml:6: section.line: ", 0) == 0);
  CHECK(job_error(s + "line = \"16 40, 24 40\"\nspacing = 0\n") ==
        "/srv/jobs/j.toml:7: section.spacing: must be a distance > 0 in km");
  CHECK(job_error(s + "line = \"16 40, 24 40\"\ndepth = 20000\n") ==
        "/srv/jobs/j.toml:7: section.depth: 20000 m is outside (0, 12000]");
  CHECK(job_error(s + "line = \"16 40, 24 40\"\nearth = \"flat\"\n") ==
        "/srv/jobs/j.toml:7: section.earth: 'flat' is not one of sphere, wgs84");
  CHECK(job_error(s + "name = \"gate\"\n") ==
        "/srv/jobs/j.toml:6: section.name: only with section.line");
  CHECK(
      job_error(s + "sections = \"no-such-gates.toml\"\n")
          .rfind("/srv/jobs/j.toml:6: section.sections: /srv/jobs/no-such-gates.toml: cannot read "
                 "section file",
                 0) == 0);
  CHECK(job_error(minimal + "[[section]]\noutput = \"s/%F.txt\"\nline = \"16 40, 24 40\"\n") ==
        "/srv/jobs/j.toml:4: section.output: 's/%F.txt' must end in .csv, .nc or .nc4");
  CHECK(job_error(minimal + "[[section]]\nline = \"16 40, 24 40\"\n") ==
        "/srv/jobs/j.toml:3: section: missing key 'output' (a .csv or .nc path template, e.g. "
        "\"sections/gates_%Y%m%d.csv\")");
}

namespace {
/// Sets the modification time of PATH to SECONDS after the epoch.
void set_mtime(const std::string& path, long seconds) {
  const struct timespec t[2] = {{seconds, 0}, {seconds, 0}};
  REQUIRE(::utimensat(AT_FDCWD, path.c_str(), t, 0) == 0);
}

/// The smallest whole PNG: signature, IHDR of a 1 x 1 grey image, IDAT, IEND
/// (bytes from the PNG specification's chunk layout; CRCs computed by zlib).
const std::string tiny_png = std::string(
    "\x89\x50\x4e\x47\x0d\x0a\x1a\x0a\x00\x00\x00\x0d\x49\x48\x44\x52\x00\x00\x00\x01"
    "\x00\x00\x00\x01\x08\x00\x00\x00\x00\x3a\x7e\x9b\x55\x00\x00\x00\x0a\x49\x44\x41\x54"
    "\x78\x9c\x63\x60\x00\x00\x00\x02\x00\x01\x48\xaf\xa4\x71\x00\x00\x00\x00\x49\x45"
    "\x4e\x44\xae\x42\x60\x82",
    67);
}  // namespace

TEST_CASE("step outputs: complete only when whole and not older than the day's output") {
  TempDir tmp;
  make_marked(tmp / "uv.nc", "complete");
  set_mtime(tmp / "uv.nc", 1000000000);  // 2001: every file written now is newer
  CHECK(step_output_state(tmp / "m.png", tmp / "uv.nc") == OutputState::absent);
  write_text(tmp / "m.png", tiny_png);
  CHECK(step_output_state(tmp / "m.png", tmp / "uv.nc") == OutputState::complete);
  write_text(tmp / "torn.png", tiny_png.substr(0, 40));  // cut inside IDAT
  CHECK(step_output_state(tmp / "torn.png", tmp / "uv.nc") == OutputState::incomplete);
  write_text(tmp / "other.png", "GIF89a not a PNG at all, but long enough");
  CHECK(step_output_state(tmp / "other.png", tmp / "uv.nc") == OutputState::incomplete);
  set_mtime(tmp / "m.png", 999999999);  // made from an older currents output: stale
  CHECK(step_output_state(tmp / "m.png", tmp / "uv.nc") == OutputState::incomplete);
  CHECK(step_output_state(tmp / "m.png", tmp / "absent.nc") == OutputState::complete);
  write_text(tmp / "s.csv", "time,section,length_m\n2031-09-01T00:00:00Z,a,1\n");
  CHECK(step_output_state(tmp / "s.csv", tmp / "uv.nc") == OutputState::complete);
  write_text(tmp / "cut.csv", "time,section,length_m\n2031-09-01T00:00");
  CHECK(step_output_state(tmp / "cut.csv", tmp / "uv.nc") == OutputState::incomplete);
  make_marked(tmp / "s.nc", "complete");
  CHECK(step_output_state(tmp / "s.nc", tmp / "uv.nc") == OutputState::complete);
  make_marked(tmp / "s4.nc4", nullptr);
  CHECK(step_output_state(tmp / "s4.nc4", tmp / "uv.nc") == OutputState::incomplete);
  fs::create_directory(tmp / "dir.png");
  CHECK(step_output_state(tmp / "dir.png", tmp / "uv.nc") == OutputState::incomplete);
}

TEST_CASE("plan: steps follow the day; duplicates and collisions are refused") {
  TempDir tmp;
  write_text(tmp / "job.toml",
             std::string("input = \"in_%d.nc\"\noutput = \"out_%d.nc\"\n") +
                 "[[quicklook]]\noutput = \"map_%d.png\"\n"
                 "[[section]]\noutput = \"sec_%d.csv\"\nline = \"16 40, 24 40\"\n");
  const JobFile j = load_job(tmp / "job.toml");
  make_input(tmp / "in_01.nc");
  make_input(tmp / "in_02.nc");
  make_marked(tmp / "out_02.nc", "complete");
  set_mtime(tmp / "out_02.nc", 2000000000);
  write_text(tmp / "map_02.png", tiny_png);  // complete and newer than the output
  set_mtime(tmp / "map_02.png", 2000000100);
  write_text(tmp / "sec_02.csv", "time,section\n");
  set_mtime(tmp / "sec_02.csv", 1999999000);  // older than the output: stale
  const std::vector<Date> days = {D(2031, 9, 1), D(2031, 9, 2), D(2031, 9, 3)};
  auto plan = make_plan(j, days, false);
  REQUIRE(plan.size() == 3);
  REQUIRE(plan[0].steps.size() == 2);
  CHECK(plan[0].steps[0].kind == StepKind::quicklook);
  CHECK(plan[0].steps[0].source == tmp / "out_01.nc");
  CHECK(plan[0].steps[0].output == tmp / "map_01.png");
  CHECK(plan[0].steps[0].action == PlanAction::run);
  CHECK(plan[0].steps[1].kind == StepKind::section);
  CHECK(plan[0].steps[1].source == tmp / "in_01.nc");
  CHECK(plan[1].action == PlanAction::skip);
  CHECK(plan[1].steps[0].action == PlanAction::skip);
  CHECK(plan[1].steps[1].action == PlanAction::redo);
  CHECK(plan[1].steps[1].was == OutputState::incomplete);
  CHECK(plan[2].action == PlanAction::missing);
  CHECK(plan[2].steps.empty());
  plan = make_plan(j, days, true);  // --force: the day and all its steps again
  CHECK(plan[1].action == PlanAction::redo);
  CHECK(plan[1].steps[0].action == PlanAction::redo);
  CHECK(plan[1].steps[0].was == OutputState::complete);

  // One map for two dates, a map over the day's output, a section over a map.
  write_text(tmp / "dup.toml", std::string("input = \"in_%d.nc\"\noutput = \"out_%d.nc\"\n") +
                                   "[[quicklook]]\noutput = \"map_%m.png\"\n");
  CHECK(error_of([&] { make_plan(load_job(tmp / "dup.toml"), days, false); }) ==
        tmp / "dup.toml" + ":3: quicklook.output: template '" + tmp / "map_%m.png" + "' gives " +
            tmp / "map_09.png" +
            " for 2031-09-02, which is also the quicklook.output of [[quicklook]] 1 for "
            "2031-09-01 (add a day field such as %d or %j)");
  write_text(tmp / "self.toml", std::string("input = \"in_%d.nc\"\noutput = \"out_%d.nc\"\n") +
                                    "[[quicklook]]\noutput = \"out_%d.nc\"\n");
  CHECK(error_of([&] { make_plan(load_job(tmp / "self.toml"), days, false); }) ==
        tmp / "self.toml" +
            ":3: quicklook.output: for 2031-09-01 the file equals the day's "
            "output: " +
            tmp / "out_01.nc");
  write_text(tmp / "cross.toml",
             std::string("input = \"in_%d.nc\"\noutput = \"out_%d.nc\"\n") +
                 "[[quicklook]]\noutput = \"x_%d.csv\"\n[[section]]\noutput = \"x_%d.csv\"\n"
                 "line = \"16 40, 24 40\"\n");
  CHECK(error_of([&] {
          make_plan(load_job(tmp / "cross.toml"), days, false);
        }).find("which is also the quicklook.output of [[quicklook]] 1 for 2031-09-01") !=
        std::string::npos);
  // Temporaries of steps are stale temporaries of the plan too.
  const pid_t child = fork();
  if (child == 0) _exit(0);
  int st = 0;
  waitpid(child, &st, 0);
  write_text(tmp / (".map_01.png.tmp-" + std::to_string(child) + "-0123abcd"), "x");
  CHECK(remove_stale_temporaries(make_plan(j, days, false)) ==
        std::vector<std::string>{tmp / (".map_01.png.tmp-" + std::to_string(child) + "-0123abcd")});
}

namespace {
struct StepCounter : RunObserver {
  std::vector<std::string> seen;  // "date kind index status"
  void step_finished(const StepResult& r) override {
    seen.push_back(r.date.iso() + " " + step_name(r.step.kind) + " " +
                   std::to_string(r.step.index + 1) + " " + status_name(r.status));
  }
};

bool png_signature(const std::string& path) {
  std::ifstream f(path, std::ios::binary);
  char head[8] = {};
  f.read(head, 8);
  return std::string(head, 8) == std::string("\x89PNG\r\n\x1a\n", 8);  // PNG spec 5.2
}
}  // namespace

TEST_CASE("run_plan: steps after the day's output; rerun skips; force redoes; failures count") {
  clear_stop();
  TempDir tmp;
  write_text(tmp / "job.toml", R"(input = "in_%d.nc"
output = "out/uv_%d.nc"
[currents]
fields = "u,v,speed"
[[quicklook]]
output = "maps/speed_%d.png"
arrows = true
width = 400
[[quicklook]]
output = "maps/ssh_%d.png"
source = "input"
width = 400
[[section]]
output = "sections/zonal_%d.csv"
line = "16 40, 24 40"
)");
  const JobFile j = load_job(tmp / "job.toml");
  make_input(tmp / "in_01.nc");
  make_input(tmp / "in_02.nc");
  const std::vector<Date> days = {D(2031, 9, 1), D(2031, 9, 2)};
  RunSettings rs;
  rs.log_json = tmp / "log.jsonl";
  StepCounter c;
  RunTotals t = run_plan(j, make_plan(j, days, false), rs, c);
  CHECK(t.done == 2);
  CHECK(t.steps_done == 6);
  CHECK(t.exit_code() == 0);
  CHECK(c.seen ==
        std::vector<std::string>{"2031-09-01 quicklook 1 done", "2031-09-01 quicklook 2 done",
                                 "2031-09-01 section 1 done", "2031-09-02 quicklook 1 done",
                                 "2031-09-02 quicklook 2 done", "2031-09-02 section 1 done"});
  for (const char* f : {"maps/speed_01.png", "maps/ssh_01.png", "sections/zonal_01.csv"})
    CHECK(step_output_state(tmp / f, tmp / "out/uv_01.nc") == OutputState::complete);
  for (const char* f : {"maps/speed_02.png", "maps/ssh_02.png", "sections/zonal_02.csv"})
    CHECK(step_output_state(tmp / f, tmp / "out/uv_02.nc") == OutputState::complete);
  CHECK(png_signature(tmp / "maps/speed_01.png"));
  {
    std::ifstream csv(tmp / "sections/zonal_01.csv");
    std::string header;
    std::getline(csv, header);
    CHECK(header.rfind("time,section,length_m,transport_per_depth_m2s", 0) == 0);
  }
  // Rerun: everything is complete and skipped.
  StepCounter c2;
  t = run_plan(j, make_plan(j, days, false), rs, c2);
  CHECK(t.skipped == 2);
  CHECK(t.steps_skipped == 6);
  CHECK(t.steps_done + t.steps_redone == 0);
  // A torn map is made again (the day's output is kept).
  write_text(tmp / "maps/ssh_01.png", "torn");
  t = run_plan(j, make_plan(j, days, false), rs, c2);
  CHECK(t.skipped == 2);
  CHECK(t.steps_redone == 1);
  CHECK(step_output_state(tmp / "maps/ssh_01.png", tmp / "out/uv_01.nc") == OutputState::complete);
  // --force: the days and their steps again.
  t = run_plan(j, make_plan(j, days, true), rs, c2);
  CHECK(t.redone == 2);
  CHECK(t.steps_redone == 6);
  // JSON: one line per day and per step, each run.
  std::ifstream log(tmp / "log.jsonl");
  std::string line;
  std::size_t lines = 0, step_lines = 0;
  while (std::getline(log, line)) {
    ++lines;
    if (line.find("\"step\": ") != std::string::npos) ++step_lines;
  }
  CHECK(lines == 4 * 8);
  CHECK(step_lines == 4 * 6);

  // A step that fails on its source (a field the output lacks) is an input
  // failure (exit 5); one whose folder is missing (make_folders = false) an
  // output failure (exit 4, which wins). The day's output is still written.
  write_text(tmp / "bad.toml", R"(input = "in_%d.nc"
output = "bad/uv_%d.nc"
make_folders = false
[currents]
fields = "u,v"
[[quicklook]]
output = "bad/vort_%d.png"
field = "vorticity"
[[section]]
output = "nowhere/s_%d.csv"
line = "16 40, 24 40"
)");
  fs::create_directory(tmp / "bad");
  const JobFile b = load_job(tmp / "bad.toml");
  StepCounter c3;
  t = run_plan(b, make_plan(b, {D(2031, 9, 1)}, false), {}, c3);
  CHECK(t.done == 1);
  CHECK(t.steps_failed_input == 1);
  CHECK(t.steps_failed_output == 1);
  CHECK(t.exit_code() == 4);
  CHECK(c3.seen ==
        std::vector<std::string>{"2031-09-01 quicklook 1 failed", "2031-09-01 section 1 failed"});
  CHECK_FALSE(fs::exists(tmp / "bad/vort_01.png"));
  CHECK(output_state(tmp / "bad/uv_01.nc") == OutputState::complete);
  for (const auto& e : fs::directory_iterator(tmp / "bad"))
    CHECK(e.path().filename().string().find(".tmp-") == std::string::npos);
  t.steps_failed_output = 0;
  CHECK(t.exit_code() == 5);
}

TEST_CASE("JSON step lines") {
  StepResult r;
  r.date = D(2031, 9, 3);
  r.step.kind = StepKind::section;
  r.step.index = 1;
  r.step.source = "/in/a.nc";
  r.step.output = "/out/s.csv";
  r.status = FileStatus::done;
  r.seconds = 0.25;
  CHECK(json_step_line(r, "job", "T") ==
        "{\"time\": \"T\", \"job\": \"job\", \"date\": \"2031-09-03\", \"step\": \"section\", "
        "\"step_index\": 2, \"input\": \"/in/a.nc\", \"output\": \"/out/s.csv\", \"status\": "
        "\"done\", \"seconds\": 0.250, \"message\": null}\n");
  r.status = FileStatus::skipped;
  CHECK(json_step_line(r, "job", "T").find("\"status\": \"skipped\", \"seconds\": null") !=
        std::string::npos);
  r.status = FileStatus::failed;
  r.message = "x";
  CHECK(json_step_line(r, "job", "T").find("\"message\": \"x\"}") != std::string::npos);
}
