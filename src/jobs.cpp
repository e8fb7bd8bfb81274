// jobs.cpp — job files, dates, plan, lock and the batch loop (see jobs.hpp).
//
// Notation: a "date" is a calendar day (Date); "days" are days since
// 1970-01-01 (std::int64_t); JOB is the job file path as given, used as the
// prefix of every job-file message ("JOB:LINE: key: problem").
#include "seatilt/jobs.hpp"

#include <dirent.h>
#include <fcntl.h>
#include <netcdf.h>
#include <sys/file.h>
#include <sys/stat.h>
#include <toml++/toml.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <cerrno>
#include <chrono>
#include <csignal>
#include <cstdio>
#include <cstring>
#include <ctime>
#include <filesystem>
#include <fstream>
#include <map>
#include <set>
#include <sstream>

#include "seatilt/product.hpp"

namespace seatilt {
namespace {

namespace fs = std::filesystem;

// ---- calendar [3] --------------------------------------------------------------------
// days_from_civil / civil_from_days: eras of 400 years (146097 days), years
// starting on 1 March so that the leap day is the last day of the year.
std::int64_t days_from_civil(std::int64_t y, unsigned m, unsigned d) {
  y -= m <= 2;
  const std::int64_t era = (y >= 0 ? y : y - 399) / 400;
  const auto yoe = static_cast<unsigned>(y - era * 400);                 // [0, 399]
  const unsigned doy = (153 * (m > 2 ? m - 3 : m + 9) + 2) / 5 + d - 1;  // [0, 365]
  const unsigned doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;            // [0, 146096]
  return era * 146097 + static_cast<std::int64_t>(doe) - 719468;
}

bool is_leap(int y) { return (y % 4 == 0 && y % 100 != 0) || y % 400 == 0; }

int days_in_month(int y, int m) {
  static constexpr int n[] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
  return m == 2 && is_leap(y) ? 29 : n[m - 1];
}

std::string errno_text(int err) { return std::strerror(err); }

std::string iso_time_utc(std::time_t t) {
  std::tm tm{};
  ::gmtime_r(&t, &tm);
  char buf[32];
  std::strftime(buf, sizeof buf, "%Y-%m-%dT%H:%M:%SZ", &tm);
  return buf;
}

// ---- templates [2] -------------------------------------------------------------------
// Fields that vary with the date, and those fixed at midnight.
constexpr const char* dated_fields = "YyCmdjbhBaAuwUWVGgF";
constexpr const char* fixed_fields = "HMS%";
constexpr const char* supported_list =
    "%Y %y %C %m %d %j %b %h %B %a %A %u %w %U %W %V %G %g %F %H %M %S %%";

std::tm tm_of(const Date& d) {
  std::tm tm{};
  tm.tm_year = d.year - 1900;
  tm.tm_mon = d.month - 1;
  tm.tm_mday = d.day;
  tm.tm_yday = static_cast<int>(d.days() - Date{d.year, 1, 1}.days());
  // 1970-01-01 was a Thursday (tm_wday 4).
  tm.tm_wday = static_cast<int>(((d.days() % 7) + 7 + 4) % 7);
  tm.tm_isdst = 0;
  return tm;
}

// ---- job file reading -------------------------------------------------------------
struct Source {
  std::string job;  // file name for messages

  [[nodiscard]] std::string at(const toml::source_region& r) const {
    return r.begin.line > 0 ? job + ":" + std::to_string(r.begin.line) : job;
  }
  [[noreturn]] void fail(const toml::node& n, const std::string& key,
                         const std::string& problem) const {
    throw UsageError(at(n.source()) + ": " + key + ": " + problem);
  }
  // Rethrows a command-line style message ("--order: 3 is not ...") for KEY.
  [[noreturn]] void rethrow(const toml::node& n, const std::string& key,
                            const UsageError& e) const {
    std::string m = e.what();
    if (m.rfind("--", 0) == 0) {
      const auto p = m.find(": ");
      if (p != std::string::npos) m = m.substr(p + 2);
    }
    fail(n, key, m);
  }
};

const char* type_words(const toml::node& n) {
  switch (n.type()) {
    case toml::node_type::string:
      return "a string";
    case toml::node_type::integer:
      return "an integer";
    case toml::node_type::floating_point:
      return "a floating-point number";
    case toml::node_type::boolean:
      return "true/false";
    case toml::node_type::date:
      return "a date";
    case toml::node_type::time:
      return "a time";
    case toml::node_type::date_time:
      return "a date-time";
    case toml::node_type::array:
      return "an array";
    case toml::node_type::table:
      return "a table";
    default:
      return "nothing";
  }
}

std::string get_string(const Source& s, const toml::node& n, const std::string& key) {
  if (!n.is_string()) s.fail(n, key, std::string("expected a string, got ") + type_words(n));
  std::string v = n.as_string()->get();
  if (v.empty()) s.fail(n, key, "must not be empty");
  return v;
}

std::int64_t get_integer(const Source& s, const toml::node& n, const std::string& key,
                         std::int64_t lo, std::int64_t hi) {
  if (!n.is_integer()) s.fail(n, key, std::string("expected an integer, got ") + type_words(n));
  const std::int64_t v = n.as_integer()->get();
  if (v < lo || v > hi)
    s.fail(n, key,
           std::to_string(v) + " is outside " + std::to_string(lo) + ".." + std::to_string(hi));
  return v;
}

double get_number(const Source& s, const toml::node& n, const std::string& key) {
  if (n.is_integer()) return static_cast<double>(n.as_integer()->get());
  if (n.is_floating_point()) return n.as_floating_point()->get();
  s.fail(n, key, std::string("expected a number, got ") + type_words(n));
}

bool get_bool(const Source& s, const toml::node& n, const std::string& key) {
  if (!n.is_boolean()) s.fail(n, key, std::string("expected true or false, got ") + type_words(n));
  return n.as_boolean()->get();
}

Date get_date(const Source& s, const toml::node& n, const std::string& key) {
  if (n.is_date()) {
    const toml::date d = n.as_date()->get();
    const std::optional<Date> v = parse_date([&] {
      char buf[16];
      std::snprintf(buf, sizeof buf, "%04u-%02u-%02u", static_cast<unsigned>(d.year),
                    static_cast<unsigned>(d.month), static_cast<unsigned>(d.day));
      return std::string(buf);
    }());
    if (!v) s.fail(n, key, "not a date in years 1..9999");
    return *v;
  }
  if (n.is_string()) {
    const std::optional<Date> v = parse_date(n.as_string()->get());
    if (!v) s.fail(n, key, "'" + n.as_string()->get() + "' is not a date YYYY-MM-DD");
    return *v;
  }
  s.fail(n, key, std::string("expected a date (YYYY-MM-DD), got ") + type_words(n));
}

// Levenshtein distance (small strings only), for "did you mean".
std::size_t edit_distance(const std::string& a, const std::string& b) {
  std::vector<std::size_t> prev(b.size() + 1), cur(b.size() + 1);
  for (std::size_t j = 0; j <= b.size(); ++j) prev[j] = j;
  for (std::size_t i = 1; i <= a.size(); ++i) {
    cur[0] = i;
    for (std::size_t j = 1; j <= b.size(); ++j)
      cur[j] = std::min({prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + (a[i - 1] != b[j - 1])});
    std::swap(prev, cur);
  }
  return prev[b.size()];
}

[[noreturn]] void unknown_key(const Source& s, const toml::key& k, const std::string& table,
                              const std::vector<std::string>& known) {
  const std::string name(k.str());
  std::string msg = "unknown key '" + name + "'" + (table.empty() ? "" : " in [" + table + "]");
  std::string best;
  std::size_t best_d = 3;  // suggest only close misspellings (distance <= 2)
  for (const auto& c : known) {
    const std::size_t d = edit_distance(name, c);
    if (d < best_d) {
      best_d = d;
      best = c;
    }
  }
  if (!best.empty()) msg += " (did you mean '" + best + "'?)";
  std::string list;
  for (const auto& c : known) list += (list.empty() ? "" : ", ") + c;
  msg += "; known: " + list;
  throw UsageError(s.at(k.source()) + ": " + msg);
}

const toml::table& get_table(const Source& s, const toml::node& n, const std::string& key) {
  if (!n.is_table())
    s.fail(n, key, std::string("expected a table [") + key + "], got " + type_words(n));
  return *n.as_table();
}

std::string absolute_folder_of(const std::string& path) {
  fs::path p = fs::path(path).parent_path();
  if (p.empty()) p = ".";
  std::error_code ec;
  fs::path a = fs::absolute(p, ec);
  if (ec) a = p;
  std::string out = a.lexically_normal().string();
  while (out.size() > 1 && out.back() == '/') out.pop_back();
  return out;
}

std::string resolve(const std::string& folder, const std::string& p) {
  if (p.empty() || p.front() == '/') return p;
  return (fs::path(folder) / p).lexically_normal().string();
}

PathTemplate read_template(const Source& s, const toml::node& n, const std::string& key,
                           const std::string& folder) {
  const std::string text = get_string(s, n, key);
  try {
    PathTemplate check(text);  // positions in the user's own text
    if (text.back() == '/') s.fail(n, key, "'" + text + "' names a folder, not a file");
  } catch (const UsageError& e) {
    s.fail(n, key, "template '" + text + "': " + e.what());
  }
  return PathTemplate(resolve(folder, text));
}

void read_dates(const Source& s, const toml::table& t, JobFile& job) {
  const std::vector<std::string> known = {"from", "to", "catch_up_days", "lag_days"};
  const toml::node* from_node = nullptr;
  const toml::node* to_node = nullptr;
  const toml::node* catch_node = nullptr;
  for (auto&& [k, v] : t) {
    const std::string key(k.str());
    const std::string dotted = "dates." + key;
    if (key == "from") {
      job.from = get_date(s, v, dotted);
      from_node = &v;
    } else if (key == "to") {
      job.to = get_date(s, v, dotted);
      to_node = &v;
    } else if (key == "catch_up_days") {
      job.catch_up_days = static_cast<int>(get_integer(s, v, dotted, 1, 36600));
      catch_node = &v;
    } else if (key == "lag_days")
      job.lag_days = static_cast<int>(get_integer(s, v, dotted, 0, 3660));
    else
      unknown_key(s, k, "dates", known);
  }
  if (to_node && !from_node) s.fail(*to_node, "dates.to", "needs dates.from");
  if (catch_node && from_node)
    s.fail(*catch_node, "dates.catch_up_days",
           "use either dates.from/dates.to (a fixed range) or dates.catch_up_days, not both");
  if (job.from && job.to && *job.to < *job.from)
    s.fail(*to_node, "dates.to", job.to->iso() + " is before dates.from " + job.from->iso());
  if (job.from && job.to && job.to->days() - job.from->days() >= 36600)
    s.fail(*to_node, "dates.to", "the range is longer than 36600 days");
}

void read_currents(const Source& s, const toml::table& t, JobFile& job) {
  const std::vector<std::string> known = {
      "variable", "units",    "order",  "equator", "equator_band",       "coast",
      "earth",    "gravity",  "fields", "deflate", "significant_digits", "threads",
      "rows",     "memory_mb"};
  CurrentsOptions& o = job.options;
  for (auto&& [k, v] : t) {
    const std::string key(k.str());
    const std::string dotted = "currents." + key;
    try {
      if (key == "variable")
        job.reader.variable = get_string(s, v, dotted);
      else if (key == "units")
        job.reader.units = get_string(s, v, dotted);
      else if (key == "order") {
        o.order = static_cast<int>(get_integer(s, v, dotted, -1000, 1000));
        validate(o);
      } else if (key == "equator") {
        const std::string x = get_string(s, v, dotted);
        if (!parse_equator(x, o.equator))
          s.fail(v, dotted, "'" + x + "' is not one of mask, beta, blend");
      } else if (key == "equator_band") {
        o.equator_band_deg = get_number(s, v, dotted);
        validate(o);
      } else if (key == "coast") {
        const std::string x = get_string(s, v, dotted);
        if (!parse_coast(x, o.coast))
          s.fail(v, dotted, "'" + x + "' is not one of one-sided, mask");
      } else if (key == "earth") {
        const std::string x = get_string(s, v, dotted);
        if (!parse_earth(x, o.earth))
          s.fail(v, dotted, "'" + x + "' is not one of sphere, wgs84");
      } else if (key == "gravity") {
        if (v.is_string()) {
          const std::string x = v.as_string()->get();
          if (!parse_gravity_name(x, o.gravity))
            s.fail(v, dotted, "'" + x + "' is not standard, wgs84 or a number in m s-2");
        } else {
          if (!v.is_number())
            s.fail(
                v, dotted,
                std::string("expected \"standard\", \"wgs84\" or a number, got ") + type_words(v));
          o.gravity = GravityModel::constant;
          o.gravity_value = get_number(s, v, dotted);
          validate(o);
        }
      } else if (key == "fields") {
        std::string list;
        if (v.is_array()) {
          const toml::array& a = *v.as_array();
          if (a.empty()) s.fail(v, dotted, "empty list (leave the key out for every field)");
          for (const toml::node& e : a)
            list += (list.empty() ? "" : ",") + get_string(s, e, dotted);
        } else {
          list = get_string(s, v, dotted);
        }
        job.fields = parse_field_list(list);
      } else if (key == "deflate")
        job.deflate = static_cast<int>(get_integer(s, v, dotted, 0, 9));
      else if (key == "significant_digits")
        job.significant_digits = static_cast<int>(get_integer(s, v, dotted, 0, 7));
      else if (key == "threads")
        job.threads = static_cast<int>(get_integer(s, v, dotted, 0, 4096));
      else if (key == "rows")
        job.rows = static_cast<std::size_t>(get_integer(s, v, dotted, 0, 1 << 30));
      else if (key == "memory_mb")
        job.memory_mb = static_cast<std::size_t>(get_integer(s, v, dotted, 16, 1 << 24));
      else
        unknown_key(s, k, "currents", known);
    } catch (const UsageError& e) {
      const std::string m = e.what();
      if (m.rfind(s.job + ":", 0) == 0) throw;  // already placed
      s.rethrow(v, dotted, e);
    }
  }
}

// ---- steps: [[quicklook]] and [[section]] tables ------------------------------------------
/// The tables of KEY: [[KEY]] (an array of tables) or a single [KEY] table.
std::vector<const toml::table*> step_tables(const Source& s, const toml::node& n,
                                            const std::string& key) {
  std::vector<const toml::table*> out;
  if (const toml::table* t = n.as_table()) return {t};
  if (const toml::array* a = n.as_array()) {
    for (const toml::node& e : *a) {
      if (!e.is_table())
        s.fail(e, key, "expected [[" + key + "]] tables, got " + std::string(type_words(e)));
      out.push_back(e.as_table());
    }
    if (!out.empty()) return out;
  }
  s.fail(n, key, "expected [[" + key + "]] tables, got " + std::string(type_words(n)));
}

int line_of(const toml::table& t) {
  int line = static_cast<int>(t.source().begin.line);
  for (auto&& [k, v] : t)
    if (line <= 0 || static_cast<int>(k.source().begin.line) < line)
      line = static_cast<int>(k.source().begin.line);
  return line;
}

/// Rethrows E (a problem with KEY at node V) as "JOB:LINE: KEY: problem",
/// dropping a leading "--option: " or "KEY: " of the message.
[[noreturn]] void place(const Source& s, const toml::node& v, const std::string& key,
                        const UsageError& e) {
  std::string m = e.what();
  if (m.rfind(s.job + ":", 0) == 0) throw e;  // already placed
  if (m.rfind(key + ": ", 0) == 0) m = m.substr(key.size() + 2);
  s.rethrow(v, key, UsageError(m));
}

/// A step's output template: like `output`, with a date field.
PathTemplate step_output(const Source& s, const toml::node& v, const std::string& dotted,
                         const std::string& folder) {
  PathTemplate t = read_template(s, v, dotted, folder);
  if (!t.has_date_fields())
    s.fail(v, dotted,
           "template '" + v.as_string()->get() +
               "' has no date field, so every date would write the same file (add e.g. %Y%m%d)");
  return t;
}

/// "A,B,..." from a string or an array of N numbers (for parse_region/parse_range).
std::string number_list(const Source& s, const toml::node& v, const std::string& dotted,
                        std::size_t n) {
  if (v.is_string()) return v.as_string()->get();
  const toml::array* a = v.as_array();
  if (!a || a->size() != n)
    s.fail(v, dotted,
           "expected a string or an array of " + std::to_string(n) + " numbers, got " +
               (a ? "an array of " + std::to_string(a->size()) : std::string(type_words(v))));
  std::string text;
  for (const toml::node& e : *a) {
    char buf[40];
    std::snprintf(buf, sizeof buf, "%.17g", get_number(s, e, dotted));
    text += (text.empty() ? "" : ",") + std::string(buf);
  }
  return text;
}

void read_quicklook(const Source& s, const toml::table& t, JobFile& job) {
  const std::vector<std::string> known = {"output", "source", "field",  "time",
                                          "region", "range",  "arrows", "width"};
  QuicklookStep q;
  q.line = line_of(t);
  bool have_output = false;
  const toml::node* arrows_node = nullptr;
  for (auto&& [k, v] : t) {
    const std::string key(k.str());
    const std::string dotted = "quicklook." + key;
    try {
      if (key == "output") {
        q.output = step_output(s, v, dotted, job.folder);
        have_output = true;
      } else if (key == "source") {
        const std::string x = get_string(s, v, dotted);
        if (x != "output" && x != "input")
          s.fail(v, dotted, "'" + x + "' is not one of output, input");
        q.of_input = x == "input";
      } else if (key == "field") {
        q.request.field = get_string(s, v, dotted);
      } else if (key == "time") {
        q.request.time = static_cast<std::size_t>(get_integer(s, v, dotted, 0, 1 << 30));
      } else if (key == "region") {
        q.options.region = parse_region(number_list(s, v, dotted, 4));
      } else if (key == "range") {
        q.options.range = parse_range(number_list(s, v, dotted, 2));
      } else if (key == "arrows") {
        q.request.arrows = q.options.arrows = get_bool(s, v, dotted);
        arrows_node = &v;
      } else if (key == "width") {
        q.options.width_px = static_cast<int>(get_integer(s, v, dotted, 320, 4096));
      } else {
        unknown_key(s, k, "[quicklook]", known);
      }
    } catch (const UsageError& e) {
      place(s, v, dotted, e);
    }
  }
  if (!have_output)
    throw UsageError(s.job + ":" + std::to_string(q.line) +
                     ": quicklook: missing key 'output' (a PNG path template, e.g. "
                     "\"maps/%Y/speed_%Y%m%d.png\")");
  if (q.of_input && q.request.arrows)
    s.fail(*arrows_node, "quicklook.arrows",
           "needs u and v from the day's output; not with source = \"input\"");
  job.quicklooks.push_back(std::move(q));
}

/// Which of a [[section]] table's physics keys were given (the others follow [currents]).
struct SectionGiven {
  bool band = false, earth = false, gravity = false;
};

void read_section(const Source& s, const toml::table& t, JobFile& job,
                  std::vector<SectionGiven>& given) {
  const std::vector<std::string> known = {"output", "name",         "line",  "sections", "spacing",
                                          "depth",  "equator_band", "earth", "gravity"};
  SectionStep st;
  st.line = line_of(t);
  SectionGiven g;
  bool have_output = false;
  std::optional<std::string> name, line;
  const toml::node* line_node = nullptr;
  const toml::node* name_node = nullptr;
  std::vector<SectionLine> from_file;
  SectionOptions& o = st.options;
  for (auto&& [k, v] : t) {
    const std::string key(k.str());
    const std::string dotted = "section." + key;
    try {
      if (key == "output") {
        st.output = step_output(s, v, dotted, job.folder);
        const std::string& text = st.output.text();
        const auto ends = [&](const char* e) {
          const std::size_t n = std::strlen(e);
          return text.size() > n && text.compare(text.size() - n, n, e) == 0;
        };
        if (!ends(".csv") && !ends(".nc") && !ends(".nc4"))
          s.fail(v, dotted, "'" + v.as_string()->get() + "' must end in .csv, .nc or .nc4");
        have_output = true;
      } else if (key == "name") {
        name = get_string(s, v, dotted);
        check_section_name(*name, dotted);
        name_node = &v;
      } else if (key == "line") {
        line = get_string(s, v, dotted);
        line_node = &v;
      } else if (key == "sections") {
        const std::string file = resolve(job.folder, get_string(s, v, dotted));
        try {
          from_file = read_section_file(file);
        } catch (const UsageError& e) {
          s.fail(v, dotted, e.what());
        }
      } else if (key == "spacing") {
        const double km = get_number(s, v, dotted);
        if (!(km > 0.0)) s.fail(v, dotted, "must be a distance > 0 in km");
        o.spacing_m = km * 1e3;
        validate(o);
      } else if (key == "depth") {
        o.depth_m = get_number(s, v, dotted);
        if (!(o.depth_m > 0.0)) s.fail(v, dotted, "must be a depth > 0 in m");
        validate(o);
      } else if (key == "equator_band") {
        o.equator_band_deg = get_number(s, v, dotted);
        validate(o);
        g.band = true;
      } else if (key == "earth") {
        const std::string x = get_string(s, v, dotted);
        if (!parse_earth(x, o.earth)) s.fail(v, dotted, "'" + x + "' is not one of sphere, wgs84");
        g.earth = true;
      } else if (key == "gravity") {
        if (v.is_string()) {
          const std::string x = v.as_string()->get();
          if (!parse_gravity_name(x, o.gravity))
            s.fail(v, dotted, "'" + x + "' is not standard, wgs84 or a number in m s-2");
        } else {
          if (!v.is_number())
            s.fail(
                v, dotted,
                std::string("expected \"standard\", \"wgs84\" or a number, got ") + type_words(v));
          o.gravity = GravityModel::constant;
          o.gravity_value = get_number(s, v, dotted);
          validate(o);
        }
        g.gravity = true;
      } else {
        unknown_key(s, k, "[section]", known);
      }
    } catch (const UsageError& e) {
      place(s, v, dotted, e);
    }
  }
  const std::string at = s.job + ":" + std::to_string(st.line) + ": section: ";
  if (!have_output)
    throw UsageError(at +
                     "missing key 'output' (a .csv or .nc path template, e.g. "
                     "\"sections/gates_%Y%m%d.csv\")");
  if (name && !line) s.fail(*name_node, "section.name", "only with section.line");
  if (line) {
    SectionLine l;
    l.name = name.value_or("line");
    try {
      l.points = parse_section_line(*line, "section.line");
    } catch (const UsageError& e) {
      place(s, *line_node, "section.line", e);
    }
    for (const SectionLine& f : from_file)
      if (f.name == l.name)
        s.fail(*line_node, "section.line",
               "name '" + l.name + "' is also used in section.sections (give section.name)");
    st.sections.push_back(std::move(l));
  }
  for (SectionLine& f : from_file) st.sections.push_back(std::move(f));
  if (st.sections.empty())
    throw UsageError(at + "needs line = \"LON LAT, LON LAT, ...\" or sections = \"FILE.toml\"");
  job.sections.push_back(std::move(st));
  given.push_back(g);
}

// ---- running --------------------------------------------------------------------------
std::atomic<int> stop_request{0};
static_assert(std::atomic<int>::is_always_lock_free,
              "request_stop must be async-signal-safe (lock-free atomic)");

RunObserver* band_observer = nullptr;  // set while run_plan runs

/// Thrown from the band hook to abandon run_currents; never escapes run_plan.
struct Interrupted {};

void between_bands() {
  if (band_observer) band_observer->band_done();
  if (stop_request.load() != 0) throw Interrupted{};
}

bool same_file(const std::string& a, const std::string& b) {
  struct stat sa {
  }, sb{};
  return ::stat(a.c_str(), &sa) == 0 && ::stat(b.c_str(), &sb) == 0 && sa.st_dev == sb.st_dev &&
         sa.st_ino == sb.st_ino;
}

std::string json_string(const std::string& s) {
  std::string o = "\"";
  for (unsigned char c : s) {
    switch (c) {
      case '"':
        o += "\\\"";
        break;
      case '\\':
        o += "\\\\";
        break;
      case '\n':
        o += "\\n";
        break;
      case '\r':
        o += "\\r";
        break;
      case '\t':
        o += "\\t";
        break;
      default:
        if (c < 0x20) {
          char buf[8];
          std::snprintf(buf, sizeof buf, "\\u%04x", c);
          o += buf;
        } else {
          o += static_cast<char>(c);
        }
    }
  }
  return o + "\"";
}

/// An O_APPEND log file; each line goes out in one write(2).
class AppendFile {
 public:
  explicit AppendFile(const std::string& path) : path_(path) {
    if (path.empty()) return;
    fd_ = ::open(path.c_str(), O_WRONLY | O_APPEND | O_CREAT | O_CLOEXEC, 0644);
    if (fd_ < 0) throw OutputError(path + ": cannot open JSON log: " + errno_text(errno));
  }
  ~AppendFile() {
    if (fd_ >= 0) ::close(fd_);
  }
  AppendFile(const AppendFile&) = delete;
  AppendFile& operator=(const AppendFile&) = delete;
  /// Appends LINE; a failing log never stops the run (the files matter more).
  void append(const std::string& line) {
    if (fd_ < 0) return;
    const char* p = line.data();
    std::size_t left = line.size();
    while (left > 0) {
      const ssize_t n = ::write(fd_, p, left);
      if (n < 0 && errno == EINTR) continue;
      if (n <= 0) return;
      p += n;
      left -= static_cast<std::size_t>(n);
    }
  }

 private:
  std::string path_;
  int fd_ = -1;
};

/// Creates the folder of PATH (and its parents) when the job says so.
void make_folder_of(const JobFile& job, const std::string& path) {
  if (!job.make_folders) return;
  const fs::path folder = fs::path(path).parent_path();
  std::error_code ec;
  if (!folder.empty()) fs::create_directories(folder, ec);
  if (ec) throw OutputError(folder.string() + ": cannot create output folder: " + ec.message());
}

/// Makes one step of a date (its source is complete); throws like the
/// quicklook and section modules.
void run_step(const JobFile& job, const RunSettings& settings, StepResult& r) {
  const StepPlan& p = r.step;
  make_folder_of(job, p.output);
  // Replace what was there when planned (stale, torn or --force) by rename;
  // never clobber a file that appeared after planning.
  const bool replace = p.was != OutputState::absent;
  const auto start = std::chrono::steady_clock::now();
  if (p.kind == StepKind::quicklook) {
    const QuicklookStep& q = job.quicklooks.at(p.index);
    MapRequest request = q.request;
    if (q.of_input && (request.field.empty() || request.field == job.reader.variable)) {
      // The height as `currents` reads it (variable and units of [currents]).
      request.as_height = true;
      request.field = job.reader.variable;
      request.units = job.reader.units;
    }
    QuicklookOptions options = q.options;
    options.force = replace;
    const MapData map = read_map_data(p.source, request);
    write_quicklook(map, options, p.output);
  } else {
    const SectionStep& st = job.sections.at(p.index);
    SectionJob sj;
    sj.inputs = {p.source};
    sj.output = p.output;
    sj.reader = job.reader;
    sj.sections = st.sections;
    sj.options = st.options;
    sj.force = replace;
    sj.command_line = settings.command_line;
    run_sections(sj);
  }
  r.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  r.status = replace ? FileStatus::redone : FileStatus::done;
}

/// True when the file at PATH ends in the PNG IEND chunk (PNG spec 11.2.5:
/// length 0, type "IEND", CRC AE 42 60 82) and starts with the signature (5.2).
bool whole_png(const std::string& path, off_t size) {
  static const unsigned char signature[8] = {0x89, 'P', 'N', 'G', '\r', '\n', 0x1a, '\n'};
  static const unsigned char iend[12] = {0, 0, 0, 0, 'I', 'E', 'N', 'D', 0xae, 0x42, 0x60, 0x82};
  if (size < 8 + 12) return false;
  const int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) return false;
  unsigned char head[8], tail[12];
  const bool ok = ::pread(fd, head, 8, 0) == 8 && ::pread(fd, tail, 12, size - 12) == 12 &&
                  std::memcmp(head, signature, 8) == 0 && std::memcmp(tail, iend, 12) == 0;
  ::close(fd);
  return ok;
}

/// True when the CSV at PATH starts with the section header and ends in a newline.
bool whole_csv(const std::string& path, off_t size) {
  static const char header[] = "time,section,";
  const std::size_t n = sizeof header - 1;
  if (size < static_cast<off_t>(n + 1)) return false;
  const int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) return false;
  char head[sizeof header];
  char last = 0;
  const bool ok = ::pread(fd, head, n, 0) == static_cast<ssize_t>(n) &&
                  ::pread(fd, &last, 1, size - 1) == 1 && std::memcmp(head, header, n) == 0 &&
                  last == '\n';
  ::close(fd);
  return ok;
}

bool has_suffix(const std::string& s, const char* suffix) {
  const std::size_t n = std::strlen(suffix);
  return s.size() >= n && s.compare(s.size() - n, n, suffix) == 0;
}

void compute(const JobFile& job, const RunSettings& settings, FileResult& r) {
  const PlanItem& item = r.item;
  make_folder_of(job, item.output);
  if (same_file(item.input, item.output))
    throw OutputError(item.output + ": output would overwrite its own input");
  CurrentsJob cj;
  cj.input = item.input;
  cj.output = item.output;
  cj.reader = job.reader;
  cj.options = job.options;
  cj.fields = job.fields.empty() ? parse_field_list("all") : job.fields;
  cj.writer.deflate = job.deflate;
  cj.writer.significant_digits = job.significant_digits;
  // Replace an incomplete output (rename is atomic); never clobber a file
  // that appeared after planning (RENAME_NOREPLACE in the writer).
  cj.writer.force = item.was != OutputState::absent;
  cj.command_line = settings.command_line;
  cj.band_rows = job.rows;
  cj.memory_bytes = job.memory_mb << 20;
  cj.between_bands = &between_bands;
  const auto start = std::chrono::steady_clock::now();
  r.summary = run_currents(cj);
  r.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  r.status = item.was == OutputState::absent ? FileStatus::done : FileStatus::redone;
}

}  // namespace

// ---- Date ------------------------------------------------------------------------------
std::int64_t Date::days() const {
  return days_from_civil(year, static_cast<unsigned>(month), static_cast<unsigned>(day));
}

Date Date::from_days(std::int64_t z) {  // civil_from_days [3]
  z += 719468;
  const std::int64_t era = (z >= 0 ? z : z - 146096) / 146097;
  const auto doe = static_cast<unsigned>(z - era * 146097);                    // [0, 146096]
  const unsigned yoe = (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;  // [0, 399]
  const std::int64_t y = static_cast<std::int64_t>(yoe) + era * 400;
  const unsigned doy = doe - (365 * yoe + yoe / 4 - yoe / 100);  // [0, 365]
  const unsigned mp = (5 * doy + 2) / 153;                       // [0, 11]
  const unsigned d = doy - (153 * mp + 2) / 5 + 1;               // [1, 31]
  const unsigned m = mp < 10 ? mp + 3 : mp - 9;                  // [1, 12]
  return Date{static_cast<int>(y + (m <= 2)), static_cast<int>(m), static_cast<int>(d)};
}

std::string Date::iso() const {
  char buf[24];
  std::snprintf(buf, sizeof buf, "%04d-%02d-%02d", year, month, day);
  return buf;
}

bool operator==(const Date& a, const Date& b) {
  return a.year == b.year && a.month == b.month && a.day == b.day;
}
bool operator<(const Date& a, const Date& b) { return a.days() < b.days(); }

std::optional<Date> parse_date(const std::string& t) {
  if (t.size() != 10 || t[4] != '-' || t[7] != '-') return std::nullopt;
  for (std::size_t k : {0, 1, 2, 3, 5, 6, 8, 9})
    if (t[k] < '0' || t[k] > '9') return std::nullopt;
  const Date d{std::stoi(t.substr(0, 4)), std::stoi(t.substr(5, 2)), std::stoi(t.substr(8, 2))};
  if (d.year < 1 || d.month < 1 || d.month > 12 || d.day < 1 ||
      d.day > days_in_month(d.year, d.month))
    return std::nullopt;
  return d;
}

Date today_utc() {
  // POSIX time counts 86400 s per day, so the day number is a floor division.
  const auto t = static_cast<std::int64_t>(std::time(nullptr));
  return Date::from_days(t >= 0 ? t / 86400 : (t - 86399) / 86400);
}

// ---- PathTemplate ----------------------------------------------------------------------
PathTemplate::PathTemplate(std::string text) : text_(std::move(text)) {
  if (text_.empty()) throw UsageError("is empty");
  for (std::size_t k = 0; k < text_.size(); ++k) {
    if (text_[k] != '%') continue;
    if (k + 1 == text_.size()) throw UsageError("ends with a lone % (write %% for a % sign)");
    const char c = text_[k + 1];
    if (c != '\0' && std::strchr(dated_fields, c) != nullptr) {
      dated_ = true;
    } else if (c == '\0' || std::strchr(fixed_fields, c) == nullptr) {
      throw UsageError(std::string("unknown date field %") + c + " at character " +
                       std::to_string(k + 1) + " (supported: " + supported_list + ")");
    }
    ++k;
  }
}

std::string PathTemplate::expand(const Date& date) const {
  const std::tm tm = tm_of(date);
  // strftime returns 0 when the buffer is too small (the text is never empty).
  std::vector<char> buf(text_.size() * 4 + 64);
  for (;;) {
    const std::size_t n = std::strftime(buf.data(), buf.size(), text_.c_str(), &tm);
    if (n > 0) return std::string(buf.data(), n);
    buf.resize(buf.size() * 2);
  }
}

// ---- job files ----------------------------------------------------------------------------
JobFile parse_job(const std::string& text, const std::string& path) {
  const Source s{path};
  toml::table root;
  try {
    root = toml::parse(text, path);
  } catch (const toml::parse_error& e) {
    throw UsageError(s.at(e.source()) + ": " + std::string(e.description()));
  }
  JobFile job;
  job.path = path;
  job.folder = absolute_folder_of(path);
  {
    std::string base = fs::path(path).filename().string();
    if (base.size() > 5 && base.compare(base.size() - 5, 5, ".toml") == 0)
      base.resize(base.size() - 5);
    job.name = base;
  }
  job.lock_file = (fs::path(job.folder) / fs::path(path).filename()).string() + ".lock";

  const std::vector<std::string> known = {"name",          "input",     "output",   "make_folders",
                                          "missing_input", "lock_file", "log_json", "dates",
                                          "currents",      "quicklook", "section"};
  std::vector<SectionGiven> section_given;
  bool have_input = false, have_output = false;
  for (auto&& [k, v] : root) {
    const std::string key(k.str());
    if (key == "name")
      job.name = get_string(s, v, key);
    else if (key == "input") {
      job.input = read_template(s, v, key, job.folder);
      have_input = true;
    } else if (key == "output") {
      job.output = read_template(s, v, key, job.folder);
      job.output_line = static_cast<int>(v.source().begin.line);
      if (!job.output.has_date_fields())
        s.fail(v, key,
               "template '" + v.as_string()->get() +
                   "' has no date field, so every date would write the same file "
                   "(add e.g. %Y%m%d)");
      have_output = true;
    } else if (key == "make_folders")
      job.make_folders = get_bool(s, v, key);
    else if (key == "missing_input") {
      const std::string x = get_string(s, v, key);
      if (x == "fail")
        job.missing_input = MissingInput::fail;
      else if (x == "skip")
        job.missing_input = MissingInput::skip;
      else
        s.fail(v, key, "'" + x + "' is not one of fail, skip");
    } else if (key == "lock_file")
      job.lock_file = resolve(job.folder, get_string(s, v, key));
    else if (key == "log_json")
      job.log_json = resolve(job.folder, get_string(s, v, key));
    else if (key == "dates")
      read_dates(s, get_table(s, v, key), job);
    else if (key == "currents")
      read_currents(s, get_table(s, v, key), job);
    else if (key == "quicklook")
      for (const toml::table* t : step_tables(s, v, key)) read_quicklook(s, *t, job);
    else if (key == "section")
      for (const toml::table* t : step_tables(s, v, key)) read_section(s, *t, job, section_given);
    else
      unknown_key(s, k, "", known);
  }
  if (!have_input)
    throw UsageError(path +
                     ": missing key 'input' (a path template, e.g. \"ssh/%Y/ssh_%Y%m%d.nc\")");
  if (!have_output)
    throw UsageError(path +
                     ": missing key 'output' (a path template, e.g. \"uv/%Y/uv_%Y%m%d.nc\")");
  if (job.input.text() == job.output.text())
    throw UsageError(path + ":" + std::to_string(job.output_line) +
                     ": output: same template as input (an output would replace its input)");
  if (job.fields.empty()) job.fields = parse_field_list("all");
  // [[section]] physics not given in the table follow [currents].
  for (std::size_t k = 0; k < job.sections.size(); ++k) {
    SectionOptions& o = job.sections[k].options;
    if (!section_given[k].band) o.equator_band_deg = job.options.equator_band_deg;
    if (!section_given[k].earth) o.earth = job.options.earth;
    if (!section_given[k].gravity) {
      o.gravity = job.options.gravity;
      o.gravity_value = job.options.gravity_value;
    }
  }
  return job;
}

JobFile load_job(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw UsageError(path + ": cannot read job file: " + errno_text(errno));
  struct stat st {};
  if (::stat(path.c_str(), &st) == 0 && S_ISDIR(st.st_mode))
    throw UsageError(path + ": cannot read job file: " + errno_text(EISDIR));
  std::ostringstream text;
  text << in.rdbuf();
  if (in.bad()) throw UsageError(path + ": cannot read job file: " + errno_text(errno));
  return parse_job(text.str(), path);
}

// ---- dates ------------------------------------------------------------------------------------
std::vector<Date> job_dates(const JobFile& job, const DateRequest& rq) {
  const Date newest = rq.today.plus(-job.lag_days);
  if (rq.to && !rq.from) throw UsageError("--to: needs --from (or use --date)");
  if (rq.date && rq.from) throw UsageError("--date: use either --date or --from/--to");
  if (rq.catch_up_days && rq.from)
    throw UsageError("--catch-up: use either --catch-up or --from/--to");
  if (rq.catch_up_days && (*rq.catch_up_days < 1 || *rq.catch_up_days > 36600))
    throw UsageError("--catch-up: " + std::to_string(*rq.catch_up_days) + " is outside 1..36600");

  Date first, last;
  bool last_defaulted = false;
  const char* what = "";
  if (rq.from) {
    first = *rq.from;
    last = rq.to ? *rq.to : newest;
    last_defaulted = !rq.to;
    what = "--from";
  } else if (rq.date || rq.catch_up_days) {
    last = rq.date ? *rq.date : newest;
    const int n = rq.catch_up_days ? *rq.catch_up_days : job.catch_up_days.value_or(1);
    first = last.plus(-(n - 1));
  } else if (job.from) {
    first = *job.from;
    last = job.to ? *job.to : newest;
    last_defaulted = !job.to;
    what = "dates.from";
  } else {
    last = newest;
    first = last.plus(-(job.catch_up_days.value_or(1) - 1));
  }
  if (last < first) {
    if (last_defaulted) return {};  // the range has not started yet
    throw UsageError(std::string(what) + ": " + first.iso() + " is after the end " + last.iso());
  }
  if (last.days() - first.days() >= 36600)
    throw UsageError(std::string(*what ? what : "dates") + ": " + first.iso() + " .. " +
                     last.iso() + " is longer than 36600 days");
  std::vector<Date> out;
  for (std::int64_t d = first.days(); d <= last.days(); ++d) out.push_back(Date::from_days(d));
  return out;
}

// ---- plan
// ----------------------------------------------------------------------------------------
OutputState output_state(const std::string& path) {
  struct stat st {};
  if (::lstat(path.c_str(), &st) != 0)
    return errno == ENOENT ? OutputState::absent : OutputState::incomplete;
  if (::stat(path.c_str(), &st) != 0 || !S_ISREG(st.st_mode)) return OutputState::incomplete;
  int nc = -1;
  if (nc_open(path.c_str(), NC_NOWRITE, &nc) != NC_NOERR) return OutputState::incomplete;
  nc_type type = NC_NAT;
  std::size_t len = 0;
  bool complete = false;
  if (nc_inq_att(nc, NC_GLOBAL, "seatilt_status", &type, &len) == NC_NOERR) {
    if (type == NC_CHAR && len < 256) {
      std::string v(len, '\0');
      if (nc_get_att_text(nc, NC_GLOBAL, "seatilt_status", v.data()) == NC_NOERR) {
        while (!v.empty() && v.back() == '\0') v.pop_back();
        complete = v == "complete";
      }
    } else if (type == NC_STRING && len == 1) {
      char* p = nullptr;
      if (nc_get_att_string(nc, NC_GLOBAL, "seatilt_status", &p) == NC_NOERR && p) {
        complete = std::string(p) == "complete";
        nc_free_string(1, &p);
      }
    }
  }
  nc_close(nc);
  return complete ? OutputState::complete : OutputState::incomplete;
}

const char* action_name(PlanAction a) {
  switch (a) {
    case PlanAction::run:
      return "run";
    case PlanAction::redo:
      return "redo";
    case PlanAction::skip:
      return "skip";
    case PlanAction::missing:
      return "missing";
    case PlanAction::missing_ok:
      return "missing-ok";
  }
  return "?";
}

const char* step_name(StepKind kind) {
  return kind == StepKind::quicklook ? "quicklook" : "section";
}

OutputState step_output_state(const std::string& path, const std::string& reference) {
  struct stat st {};
  if (::lstat(path.c_str(), &st) != 0)
    return errno == ENOENT ? OutputState::absent : OutputState::incomplete;
  if (::stat(path.c_str(), &st) != 0 || !S_ISREG(st.st_mode)) return OutputState::incomplete;
  struct stat ref {};
  if (::stat(reference.c_str(), &ref) == 0) {  // made from an older currents output: stale
    const auto ns = [](const struct timespec& t) {
      return static_cast<long double>(t.tv_sec) * 1e9L + static_cast<long double>(t.tv_nsec);
    };
    if (ns(st.st_mtim) < ns(ref.st_mtim)) return OutputState::incomplete;
  }
  bool whole = false;
  if (has_suffix(path, ".nc") || has_suffix(path, ".nc4"))
    whole = output_state(path) == OutputState::complete;
  else if (has_suffix(path, ".csv"))
    whole = whole_csv(path, st.st_size);
  else
    whole = whole_png(path, st.st_size);
  return whole ? OutputState::complete : OutputState::incomplete;
}

std::vector<PlanItem> make_plan(const JobFile& job, const std::vector<Date>& dates, bool force) {
  std::vector<PlanItem> plan;
  std::map<std::string, Date> seen;
  // Every file a plan writes: path -> (date, "output" or the step's key and number).
  std::map<std::string, std::pair<Date, std::string>> files;
  const std::string where = job.path + ":" + std::to_string(job.output_line) + ": output: ";
  for (const Date& d : dates) {
    PlanItem it;
    it.date = d;
    it.input = job.input.expand(d);
    it.output = job.output.expand(d);
    const auto [pos, fresh] = seen.emplace(it.output, d);
    if (!fresh)
      throw UsageError(where + "template '" + job.output.text() + "' gives one file for " +
                       pos->second.iso() + " and " + d.iso() + ": " + it.output +
                       " (add a day field such as %d or %j)");
    if (it.output == it.input)
      throw UsageError(where + "for " + d.iso() + " the output equals the input: " + it.output);
    it.was = output_state(it.output);
    struct stat st {};
    const bool input_missing = ::stat(it.input.c_str(), &st) != 0 && errno == ENOENT;
    if (it.was == OutputState::complete && !force)
      it.action = PlanAction::skip;
    else if (input_missing)
      it.action =
          job.missing_input == MissingInput::skip ? PlanAction::missing_ok : PlanAction::missing;
    else
      it.action = it.was == OutputState::absent ? PlanAction::run : PlanAction::redo;
    files.emplace(it.output, std::make_pair(d, std::string("output")));
    plan.push_back(std::move(it));
  }
  // Steps, after every date's output is known (a step may not write another date's output).
  for (PlanItem& it : plan) {
    if (it.action == PlanAction::missing || it.action == PlanAction::missing_ok) continue;
    const bool computing = it.action == PlanAction::run || it.action == PlanAction::redo;
    const auto add = [&](StepKind kind, std::size_t index, const PathTemplate& tmpl, int line,
                         const std::string& source) {
      StepPlan p;
      p.kind = kind;
      p.index = index;
      p.source = source;
      p.output = tmpl.expand(it.date);
      const std::string key = std::string(step_name(kind)) + ".output";
      const std::string label =
          key + " of [[" + step_name(kind) + "]] " + std::to_string(index + 1);
      const std::string at = job.path + ":" + std::to_string(line) + ": " + key + ": ";
      if (p.output == it.input || p.output == it.output)
        throw UsageError(at + "for " + it.date.iso() + " the file equals the day's " +
                         (p.output == it.input ? "input" : "output") + ": " + p.output);
      const auto [pos, fresh] = files.emplace(p.output, std::make_pair(it.date, label));
      if (!fresh)
        throw UsageError(at + "template '" + tmpl.text() + "' gives " + p.output + " for " +
                         it.date.iso() + ", which is also the " + pos->second.second + " for " +
                         pos->second.first.iso() + " (add a day field such as %d or %j)");
      p.was = step_output_state(p.output, it.output);
      if (computing || force)
        p.action = p.was == OutputState::absent ? PlanAction::run : PlanAction::redo;
      else
        p.action = p.was == OutputState::complete ? PlanAction::skip
                   : p.was == OutputState::absent ? PlanAction::run
                                                  : PlanAction::redo;
      it.steps.push_back(std::move(p));
    };
    for (std::size_t k = 0; k < job.quicklooks.size(); ++k) {
      const QuicklookStep& q = job.quicklooks[k];
      add(StepKind::quicklook, k, q.output, q.line, q.of_input ? it.input : it.output);
    }
    for (std::size_t k = 0; k < job.sections.size(); ++k)
      add(StepKind::section, k, job.sections[k].output, job.sections[k].line, it.input);
  }
  return plan;
}

std::vector<std::string> remove_stale_temporaries(const std::vector<PlanItem>& plan) {
  // folder -> output file names of this plan in it
  std::map<std::string, std::set<std::string>> names;
  for (const PlanItem& it : plan) {
    const fs::path p(it.output);
    names[p.parent_path().string()].insert(p.filename().string());
    for (const StepPlan& step : it.steps) {
      const fs::path q(step.output);
      names[q.parent_path().string()].insert(q.filename().string());
    }
  }
  std::vector<std::string> removed;
  const pid_t self = ::getpid();
  for (const auto& [folder, files] : names) {
    DIR* dir = ::opendir(folder.empty() ? "." : folder.c_str());
    if (!dir) continue;
    while (const dirent* e = ::readdir(dir)) {
      // ".<name>.tmp-<pid>-<8 hex>" (writer.cpp create_temporary)
      const std::string n = e->d_name;
      if (n.size() < 16 || n[0] != '.') continue;
      const auto t = n.rfind(".tmp-");
      if (t == std::string::npos || t < 2) continue;
      if (files.count(n.substr(1, t - 1)) == 0) continue;
      const auto dash = n.find('-', t + 5);
      if (dash == std::string::npos || dash == t + 5 || n.size() - dash - 1 != 8) continue;
      const std::string pid_text = n.substr(t + 5, dash - t - 5);
      const std::string hex = n.substr(dash + 1);
      if (pid_text.size() > 9 || pid_text.find_first_not_of("0123456789") != std::string::npos ||
          hex.find_first_not_of("0123456789abcdef") != std::string::npos)
        continue;
      const auto pid = static_cast<pid_t>(std::stol(pid_text));
      if (pid <= 0 || pid == self) continue;
      if (::kill(pid, 0) == 0 || errno != ESRCH) continue;  // alive (or not ours to judge)
      const std::string full = (fs::path(folder) / n).string();
      struct stat st {};
      if (::lstat(full.c_str(), &st) != 0 || !S_ISREG(st.st_mode)) continue;
      if (::unlink(full.c_str()) == 0) removed.push_back(full);
    }
    ::closedir(dir);
  }
  std::sort(removed.begin(), removed.end());
  return removed;
}

// ---- lock
// ------------------------------------------------------------------------------------------
JobLock::JobLock(const std::string& path, const std::string& job_path) {
  fd_ = ::open(path.c_str(), O_RDWR | O_CREAT | O_CLOEXEC, 0644);
  if (fd_ < 0)
    throw OutputError(path + ": cannot open lock file: " + errno_text(errno) +
                      " (set lock_file in the job file)");
  int rc;
  do rc = ::flock(fd_, LOCK_EX | LOCK_NB);
  while (rc != 0 && errno == EINTR);
  if (rc != 0) {
    const int err = errno;
    char buf[512] = {};
    const ssize_t n = ::pread(fd_, buf, sizeof buf - 1, 0);
    ::close(fd_);
    fd_ = -1;
    if (err != EWOULDBLOCK) throw OutputError(path + ": cannot lock: " + errno_text(err));
    std::string holder = n > 0 ? std::string(buf, static_cast<std::size_t>(n)) : std::string();
    while (!holder.empty() && (holder.back() == '\n' || holder.back() == ' ')) holder.pop_back();
    for (char& c : holder)
      if (c == '\n') c = ' ';
    throw LockBusy(job_path + ": another run holds the lock " + path + " (" +
                   (holder.empty() ? std::string("holder not yet recorded") : holder) +
                   "); try again later");
  }
  char host[256] = {};
  if (::gethostname(host, sizeof host - 1) != 0) std::strcpy(host, "?");
  const std::string who = "pid " + std::to_string(::getpid()) + ", started " +
                          iso_time_utc(std::time(nullptr)) + ", host " + host + "\n";
  // Best effort: the lock itself is the flock, the text only informs.
  if (::ftruncate(fd_, 0) == 0) {
    const ssize_t w = ::pwrite(fd_, who.data(), who.size(), 0);
    (void)w;
  }
}

JobLock::~JobLock() {
  if (fd_ >= 0) ::close(fd_);
}
JobLock::JobLock(JobLock&& o) noexcept : fd_(o.fd_) { o.fd_ = -1; }
JobLock& JobLock::operator=(JobLock&& o) noexcept {
  if (this != &o) {
    if (fd_ >= 0) ::close(fd_);
    fd_ = o.fd_;
    o.fd_ = -1;
  }
  return *this;
}

// ---- stop
// ------------------------------------------------------------------------------------------
void request_stop(int signo) noexcept { stop_request.store(signo > 0 ? signo : SIGTERM); }
int stop_signal() noexcept { return stop_request.load(); }
void clear_stop() noexcept { stop_request.store(0); }

// ---- run
// ---------------------------------------------------------------------------------------------
const char* status_name(FileStatus s) {
  switch (s) {
    case FileStatus::done:
      return "done";
    case FileStatus::redone:
      return "redone";
    case FileStatus::skipped:
      return "skipped";
    case FileStatus::missing_ok:
      return "missing";
    case FileStatus::failed:
      return "failed";
    case FileStatus::interrupted:
      return "interrupted";
  }
  return "?";
}

int RunTotals::exit_code() const {
  if (stop_signal > 0) return 128 + stop_signal;  // shell convention for "killed by signal"
  if (failed_output + steps_failed_output > 0) return static_cast<int>(ExitCode::output);
  if (failed_input + steps_failed_input > 0) return static_cast<int>(ExitCode::batch);
  return static_cast<int>(ExitCode::ok);
}

std::string json_log_line(const FileResult& r, const std::string& job_name,
                          const std::string& time_iso) {
  const bool computed = r.status == FileStatus::done || r.status == FileStatus::redone;
  const bool has_message = r.status == FileStatus::failed || r.status == FileStatus::interrupted;
  char secs[32];
  std::snprintf(secs, sizeof secs, "%.3f", r.seconds);
  std::string o = "{\"time\": " + json_string(time_iso) + ", \"job\": " + json_string(job_name) +
                  ", \"date\": " + json_string(r.item.date.iso()) +
                  ", \"input\": " + json_string(r.item.input) +
                  ", \"output\": " + json_string(r.item.output) +
                  ", \"status\": " + json_string(status_name(r.status)) +
                  ", \"seconds\": " + (computed ? std::string(secs) : "null");
  if (computed) {
    char share[32];
    std::snprintf(share, sizeof share, "%.6g",
                  r.summary.cells > 0 ? static_cast<double>(r.summary.flagged) /
                                            static_cast<double>(r.summary.cells)
                                      : 0.0);
    o += ", \"steps\": " + std::to_string(r.summary.steps) +
         ", \"cells\": " + std::to_string(r.summary.cells) + ", \"flagged_share\": " + share;
  } else {
    o += ", \"steps\": null, \"cells\": null, \"flagged_share\": null";
  }
  o += ", \"message\": " + (has_message ? json_string(r.message) : std::string("null")) + "}\n";
  return o;
}

std::string json_step_line(const StepResult& r, const std::string& job_name,
                           const std::string& time_iso) {
  const bool computed = r.status == FileStatus::done || r.status == FileStatus::redone;
  const bool has_message = r.status == FileStatus::failed || r.status == FileStatus::interrupted;
  char secs[32];
  std::snprintf(secs, sizeof secs, "%.3f", r.seconds);
  return "{\"time\": " + json_string(time_iso) + ", \"job\": " + json_string(job_name) +
         ", \"date\": " + json_string(r.date.iso()) +
         ", \"step\": " + json_string(step_name(r.step.kind)) +
         ", \"step_index\": " + std::to_string(r.step.index + 1) +
         ", \"input\": " + json_string(r.step.source) +
         ", \"output\": " + json_string(r.step.output) +
         ", \"status\": " + json_string(status_name(r.status)) +
         ", \"seconds\": " + (computed ? std::string(secs) : "null") +
         ", \"message\": " + (has_message ? json_string(r.message) : std::string("null")) + "}\n";
}

RunTotals run_plan(const JobFile& job, const std::vector<PlanItem>& plan,
                   const RunSettings& settings, RunObserver& observer) {
  AppendFile log(settings.log_json);
  struct ObserverScope {
    explicit ObserverScope(RunObserver* o) { band_observer = o; }
    ~ObserverScope() { band_observer = nullptr; }
    ObserverScope(const ObserverScope&) = delete;
    ObserverScope& operator=(const ObserverScope&) = delete;
  } scope(&observer);

  RunTotals totals;
  bool stopped = false;  // a file was abandoned or left undone because of a stop request
  const auto start = std::chrono::steady_clock::now();
  for (std::size_t i = 0; i < plan.size(); ++i) {
    if (stop_signal() != 0) {
      stopped = true;
      break;
    }
    observer.file_started(plan[i], i, plan.size());
    FileResult r;
    r.item = plan[i];
    switch (r.item.action) {
      case PlanAction::skip:
        r.status = FileStatus::skipped;
        break;
      case PlanAction::missing_ok:
        r.status = FileStatus::missing_ok;
        break;
      case PlanAction::missing:
        r.status = FileStatus::failed;
        r.code = ExitCode::input;
        r.message = input_message(r.item.input, "", "input file does not exist");
        break;
      case PlanAction::run:
      case PlanAction::redo:
        try {
          compute(job, settings, r);
        } catch (const Interrupted&) {
          r.status = FileStatus::interrupted;
          r.message = r.item.output + ": interrupted by signal " + std::to_string(stop_signal()) +
                      "; temporary file removed, nothing written (a rerun makes it)";
        } catch (const Error& e) {
          r.status = FileStatus::failed;
          r.code = e.code() == ExitCode::output ? ExitCode::output : ExitCode::input;
          r.message = e.what();
        } catch (const std::exception& e) {
          r.status = FileStatus::failed;
          r.code = ExitCode::input;
          r.message = r.item.output + ": internal error: " + e.what();
        }
        break;
    }
    switch (r.status) {
      case FileStatus::done:
        ++totals.done;
        break;
      case FileStatus::redone:
        ++totals.redone;
        break;
      case FileStatus::skipped:
        ++totals.skipped;
        break;
      case FileStatus::missing_ok:
        ++totals.missing_ok;
        break;
      case FileStatus::failed:
        ++(r.code == ExitCode::output ? totals.failed_output : totals.failed_input);
        break;
      case FileStatus::interrupted:
        stopped = true;
        break;
    }
    log.append(json_log_line(r, job.name, iso_time_utc(std::time(nullptr))));
    observer.file_finished(r, i, plan.size());
    // Steps, once the day's output is complete.
    const bool ready = r.status == FileStatus::done || r.status == FileStatus::redone ||
                       r.status == FileStatus::skipped;
    if (ready && !stopped)
      for (const StepPlan& step : r.item.steps) {
        if (stop_signal() != 0) {
          stopped = true;
          break;
        }
        StepResult sr;
        sr.date = r.item.date;
        sr.step = step;
        if (step.action == PlanAction::skip) {
          sr.status = FileStatus::skipped;
        } else {
          try {
            run_step(job, settings, sr);
          } catch (const Error& e) {
            sr.status = FileStatus::failed;
            sr.code = e.code() == ExitCode::output ? ExitCode::output : ExitCode::input;
            sr.message = e.what();
          } catch (const std::exception& e) {
            sr.status = FileStatus::failed;
            sr.code = ExitCode::input;
            sr.message = step.output + ": internal error: " + e.what();
          }
        }
        switch (sr.status) {
          case FileStatus::done:
            ++totals.steps_done;
            break;
          case FileStatus::redone:
            ++totals.steps_redone;
            break;
          case FileStatus::skipped:
            ++totals.steps_skipped;
            break;
          default:
            ++(sr.code == ExitCode::output ? totals.steps_failed_output
                                           : totals.steps_failed_input);
            break;
        }
        log.append(json_step_line(sr, job.name, iso_time_utc(std::time(nullptr))));
        observer.step_finished(sr);
      }
    if (stopped) break;
  }
  if (stopped) totals.stop_signal = stop_signal();
  totals.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  return totals;
}

}  // namespace seatilt
