// seatilt-io-floor — the netCDF-C I/O floor of `seatilt currents`.
//
// Reads the height variable of each input and writes the nine output
// variables of `seatilt currents` with the same names, types, shape,
// chunking ((1, chunk_rows, nx), chunk_rows = clamp(ceil(262144 / nx), 1, ny),
// as src/writer.cpp), _FillValue and compression (deflate level N with
// shuffle) through plain netCDF-C, one thread, with no arithmetic: the eight
// float variables receive the heights themselves (fill where missing), the
// flag variable 8 where missing and 0 elsewhere. Its run time is what the
// single-threaded libraries need for the same file formats (scripts/bench;
// docs/performance.md).
//
//   seatilt-io-floor [--deflate N] [--variable NAME] -o OUTDIR IN.nc...
//   seatilt-io-floor --read-only [--variable NAME] IN.nc...
//
// --read-only only reads every time step of the height variable (whole
// maps, nc_get_vara_float): the floor of `seatilt climatology` on height
// files, which reads many inputs and writes one small output.
//
// Outputs: OUTDIR/<input name without .nc>_floor.nc. Exit 0, or 1 with one
// line on stderr. A benchmark helper, not part of the seatilt command.
#include <netcdf.h>

#include <algorithm>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <stdexcept>
#include <string>
#include <vector>

namespace {

void ok(int status, const std::string& what) {
  if (status != NC_NOERR) throw std::runtime_error(what + ": " + nc_strerror(status));
}

std::string text_att(int nc, int var, const char* name) {
  std::size_t len = 0;
  nc_type type = NC_NAT;
  if (nc_inq_att(nc, var, name, &type, &len) != NC_NOERR || type != NC_CHAR) return {};
  std::string s(len, '\0');
  ok(nc_get_att_text(nc, var, name, s.data()), name);
  return s;
}

/// The height variable: NAME, or the first with a sea-surface-height standard_name.
int find_height(int nc, const std::string& name) {
  int var = -1;
  if (!name.empty()) {
    ok(nc_inq_varid(nc, name.c_str(), &var), "variable " + name);
    return var;
  }
  int nvars = 0;
  ok(nc_inq_nvars(nc, &nvars), "listing variables");
  for (int v = 0; v < nvars; ++v)
    if (text_att(nc, v, "standard_name").rfind("sea_surface_height", 0) == 0) return v;
  throw std::runtime_error("no variable with a sea_surface_height standard_name");
}

std::string output_name(const std::string& dir, const std::string& input) {
  std::string base = input.substr(input.find_last_of('/') + 1);
  if (base.size() > 3 && base.compare(base.size() - 3, 3, ".nc") == 0) base.resize(base.size() - 3);
  return dir + "/" + base + "_floor.nc";
}

void run(const std::string& input, const std::string& output, const std::string& variable,
         int deflate) {
  int in = -1;
  ok(nc_open(input.c_str(), NC_NOWRITE, &in), input);
  const int hvar = find_height(in, variable);
  int ndims = 0, dims[NC_MAX_VAR_DIMS];
  ok(nc_inq_varndims(in, hvar, &ndims), "height dimensions");
  ok(nc_inq_vardimid(in, hvar, dims), "height dimensions");
  if (ndims != 2 && ndims != 3)
    throw std::runtime_error("height is not (lat, lon) or (time, lat, lon)");
  const bool has_time = ndims == 3;
  std::size_t len[3] = {1, 0, 0};
  for (int d = 0; d < ndims; ++d)
    ok(nc_inq_dimlen(in, dims[d], &len[d + (has_time ? 0 : 1)]), "dimension");
  const std::size_t nt = len[0], ny = len[1], nx = len[2];
  float in_fill = NC_FILL_FLOAT;
  nc_get_att_float(in, hvar, "_FillValue", &in_fill);

  // Define: dimensions and coordinate variables copied, nine outputs.
  int out = -1;
  ok(nc_create(output.c_str(), NC_NETCDF4 | NC_CLOBBER, &out), output);
  int odims[3];
  for (int d = 0; d < ndims; ++d) {
    char name[NC_MAX_NAME + 1];
    ok(nc_inq_dimname(in, dims[d], name), "dimension name");
    const std::size_t n = (has_time && d == 0) ? NC_UNLIMITED : len[d + (has_time ? 0 : 1)];
    ok(nc_def_dim(out, name, n, &odims[d]), "defining dimension");
  }
  std::vector<int> coord_in, coord_out;
  for (int d = 0; d < ndims; ++d) {
    char name[NC_MAX_NAME + 1];
    ok(nc_inq_dimname(in, dims[d], name), "dimension name");
    int cv = -1;
    if (nc_inq_varid(in, name, &cv) != NC_NOERR) continue;
    int ov = -1;
    ok(nc_def_var(out, name, NC_DOUBLE, 1, &odims[d], &ov), "defining coordinate");
    int natts = 0;
    ok(nc_inq_varnatts(in, cv, &natts), "coordinate attributes");
    for (int a = 0; a < natts; ++a) {
      char aname[NC_MAX_NAME + 1];
      ok(nc_inq_attname(in, cv, a, aname), "attribute");
      if (std::strcmp(aname, "_FillValue") != 0) ok(nc_copy_att(in, cv, aname, out, ov), aname);
    }
    coord_in.push_back(cv);
    coord_out.push_back(ov);
  }
  const std::size_t chunk_rows = std::clamp<std::size_t>((262144 + nx - 1) / nx, 1, ny);
  const std::size_t chunk3[3] = {1, chunk_rows, nx};
  const char* names[9] = {
      "u",      "v",           "speed",  "vorticity", "strain_normal", "strain_shear",
      "strain", "okubo_weiss", "quality"};
  int ovar[9];
  for (int k = 0; k < 9; ++k) {
    const bool flag = k == 8;
    ok(nc_def_var(out, names[k], flag ? NC_BYTE : NC_FLOAT, ndims, odims, &ovar[k]), names[k]);
    ok(nc_def_var_chunking(out, ovar[k], NC_CHUNKED, has_time ? chunk3 : chunk3 + 1), "chunking");
    if (deflate > 0) ok(nc_def_var_deflate(out, ovar[k], 1, 1, deflate), "deflate");
    if (!flag) {
      const float fill = NC_FILL_FLOAT;
      ok(nc_put_att_float(out, ovar[k], "_FillValue", NC_FLOAT, 1, &fill), "_FillValue");
    }
  }
  ok(nc_enddef(out), "enddef");
  for (std::size_t c = 0; c < coord_in.size(); ++c) {
    int cd = 0;
    ok(nc_inq_vardimid(in, coord_in[c], &cd), "coordinate");
    std::size_t n = 0;
    ok(nc_inq_dimlen(in, cd, &n), "coordinate");
    std::vector<double> values(n);
    ok(nc_get_var_double(in, coord_in[c], values.data()), "reading coordinate");
    const std::size_t start = 0;
    ok(nc_put_vara_double(out, coord_out[c], &start, &n, values.data()), "writing coordinate");
  }

  // Data: one time step at a time, whole rows.
  std::vector<float> h(ny * nx);
  std::vector<signed char> q(ny * nx);
  for (std::size_t t = 0; t < nt; ++t) {
    const std::size_t start[3] = {t, 0, 0}, count[3] = {1, ny, nx};
    const int off = has_time ? 0 : 1;
    ok(nc_get_vara_float(in, hvar, start + off, count + off, h.data()), "reading heights");
    for (std::size_t k = 0; k < h.size(); ++k) {
      const bool missing = h[k] == in_fill || !(h[k] == h[k]);
      if (missing) h[k] = NC_FILL_FLOAT;
      q[k] = missing ? 8 : 0;
    }
    for (int k = 0; k < 8; ++k)
      ok(nc_put_vara_float(out, ovar[k], start + off, count + off, h.data()), names[k]);
    ok(nc_put_vara_schar(out, ovar[8], start + off, count + off, q.data()), names[8]);
  }
  ok(nc_close(out), "closing " + output);
  ok(nc_close(in), "closing " + input);
}

/// Reads every time step of the height variable; returns the count of
/// valid values (so that the reads cannot be optimised away).
std::size_t read_only(const std::string& input, const std::string& variable) {
  int in = -1;
  ok(nc_open(input.c_str(), NC_NOWRITE, &in), input);
  const int hvar = find_height(in, variable);
  int ndims = 0, dims[NC_MAX_VAR_DIMS];
  ok(nc_inq_varndims(in, hvar, &ndims), "height dimensions");
  ok(nc_inq_vardimid(in, hvar, dims), "height dimensions");
  if (ndims != 2 && ndims != 3)
    throw std::runtime_error("height is not (lat, lon) or (time, lat, lon)");
  const bool has_time = ndims == 3;
  std::size_t len[3] = {1, 0, 0};
  for (int d = 0; d < ndims; ++d)
    ok(nc_inq_dimlen(in, dims[d], &len[d + (has_time ? 0 : 1)]), "dimension");
  float in_fill = NC_FILL_FLOAT;
  nc_get_att_float(in, hvar, "_FillValue", &in_fill);
  std::vector<float> h(len[1] * len[2]);
  std::size_t valid = 0;
  for (std::size_t t = 0; t < len[0]; ++t) {
    const std::size_t start[3] = {t, 0, 0}, count[3] = {1, len[1], len[2]};
    const int off = has_time ? 0 : 1;
    ok(nc_get_vara_float(in, hvar, start + off, count + off, h.data()), "reading heights");
    for (const float x : h) valid += x == x && x != in_fill;
  }
  ok(nc_close(in), "closing " + input);
  return valid;
}

}  // namespace

int main(int argc, char** argv) {
  std::string outdir, variable;
  int deflate = 1;
  std::vector<std::string> inputs;
  bool reading_only = false;
  for (int a = 1; a < argc; ++a) {
    const std::string arg = argv[a];
    if (arg == "--read-only") {
      reading_only = true;
    } else if ((arg == "-o" || arg == "--deflate" || arg == "--variable") && a + 1 < argc) {
      const std::string value = argv[++a];
      if (arg == "-o")
        outdir = value;
      else if (arg == "--deflate")
        deflate = std::atoi(value.c_str());
      else
        variable = value;
    } else {
      inputs.push_back(arg);
    }
  }
  if ((outdir.empty() && !reading_only) || inputs.empty() || deflate < 0 || deflate > 9) {
    std::fprintf(stderr,
                 "usage: seatilt-io-floor [--deflate 0..9] [--variable NAME] -o OUTDIR IN.nc...\n"
                 "       seatilt-io-floor --read-only [--variable NAME] IN.nc...\n");
    return 1;
  }
  if (reading_only) {
    std::size_t valid = 0;
    for (const std::string& input : inputs) {
      try {
        valid += read_only(input, variable);
      } catch (const std::exception& e) {
        std::fprintf(stderr, "seatilt-io-floor: %s: %s\n", input.c_str(), e.what());
        return 1;
      }
    }
    std::printf("%zu valid heights\n", valid);
    return 0;
  }
  for (const std::string& input : inputs) {
    try {
      run(input, output_name(outdir, input), variable, deflate);
    } catch (const std::exception& e) {
      std::fprintf(stderr, "seatilt-io-floor: %s: %s\n", input.c_str(), e.what());
      return 1;
    }
  }
  return 0;
}
