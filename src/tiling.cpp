#include "seatilt/tiling.hpp"

#include <algorithm>
#include <cmath>
#include <stdexcept>

#include "seatilt/diagnostics.hpp"
#include "seatilt/error.hpp"
#include "seatilt/product.hpp"

namespace seatilt {

std::vector<Band> plan_bands(std::size_t ny, std::size_t rows) {
  if (rows == 0) throw std::invalid_argument("plan_bands: rows must be >= 1");
  std::vector<Band> bands;
  for (std::size_t j = 0; j < ny; j += rows) bands.push_back({j, std::min(rows, ny - j)});
  return bands;
}

std::size_t band_rows_for_budget(std::size_t nx, std::size_t ny, std::size_t h,
                                 std::size_t memory_bytes, std::size_t align) {
  align = std::max<std::size_t>(align, 1);
  // bytes(R) = (R + 4h) nx 8 + (R + 2h) nx 16 + R nx 49  (see tiling.hpp)
  const double per_row = static_cast<double>(nx) * (8.0 + 16.0 + 49.0);
  const double fixed = static_cast<double>(nx) * static_cast<double>(h) * (32.0 + 32.0);
  double r = (static_cast<double>(memory_bytes) - fixed) / per_row;
  auto rows = r < 1.0 ? std::size_t{1} : static_cast<std::size_t>(r);
  rows = std::max(align, rows / align * align);
  return std::min(rows, std::max<std::size_t>(ny, 1));
}

CurrentsSummary run_currents(const CurrentsJob& job) {
  validate(job.options);
  Reader reader(job.input, job.reader);
  const HeightInfo& info = reader.info();
  Grid grid = [&] {
    try {
      return Grid(info.lat.values, info.lon.values);
    } catch (const std::invalid_argument& e) {
      throw InputError(input_message(job.input, info.variable, e.what()));
    }
  }();

  const GeostrophicKernel kernel(grid, job.options);
  const KinematicsKernel kinematics(grid, job.options.order, job.options.coast,
                                    job.options.earth);
  const std::size_t hv = kernel.halo_rows();       // heights around velocity rows
  const std::size_t hd = kinematics.halo_rows();   // velocities around diagnostic rows
  const std::size_t ny = grid.ny(), nx = grid.nx();

  WriterSettings ws = job.writer;
  ws.global_attrs = currents_global_attributes(info, job.options, job.command_line);
  const auto variables = currents_variables(job.fields, info.kind);
  Writer writer(job.output, info, variables, ws);

  const std::size_t rows =
      job.band_rows > 0 ? std::min(job.band_rows, ny)
                        : band_rows_for_budget(nx, ny, hv + hd, job.memory_bytes, writer.chunk_rows());

  CurrentsSummary sum;
  sum.band_rows = rows;
  Field eta, u, v, row_out;
  std::vector<std::uint8_t> flags, band_flags;
  Kinematics kin;
  for (std::size_t t = 0; t < info.nt; ++t) {
    std::size_t valid_height = 0;
    for (const Band& b : plan_bands(ny, rows)) {
      if (job.between_bands) job.between_bands();
      // velocity rows [v0, v1) cover the diagnostic halo; height rows [e0, e1) theirs.
      const std::size_t v0 = b.j0 >= hd ? b.j0 - hd : 0;
      const std::size_t v1 = std::min(ny, b.j0 + b.n + hd);
      const std::size_t e0 = v0 >= hv ? v0 - hv : 0;
      const std::size_t e1 = std::min(ny, v1 + hv);
      reader.read_rows(t, e0, e1 - e0, eta);
      for (std::size_t j = b.j0 - e0; j < b.j0 - e0 + b.n; ++j)
        for (std::size_t i = 0; i < nx; ++i) valid_height += !std::isnan(eta.at(j, i));
      kernel.compute(eta, e0, v0, v1 - v0, u, v, flags);
      band_flags.assign(flags.begin() + static_cast<std::ptrdiff_t>((b.j0 - v0) * nx),
                        flags.begin() + static_cast<std::ptrdiff_t>((b.j0 - v0 + b.n) * nx));
      kinematics.compute(u, v, v0, b.j0, b.n, kin, band_flags);

      for (std::size_t k = 0; k < variables.size(); ++k) {
        const std::string& name = variables[k].name;
        if (name == "quality") {
          writer.write_flags(k, t, b.j0, b.n, band_flags.data());
          continue;
        }
        const Field* src = nullptr;
        if (name == "u" || name == "v") {
          const Field& full = name == "u" ? u : v;
          row_out = Field(b.n, nx);
          std::copy(full.row(b.j0 - v0), full.row(b.j0 - v0) + b.n * nx, row_out.data.begin());
          src = &row_out;
        } else if (name == "speed") src = &kin.speed;
        else if (name == "vorticity") src = &kin.vorticity;
        else if (name == "strain_normal") src = &kin.strain_normal;
        else if (name == "strain_shear") src = &kin.strain_shear;
        else if (name == "strain") src = &kin.strain;
        else if (name == "okubo_weiss") src = &kin.okubo_weiss;
        else throw std::logic_error("run_currents: no data for field " + name);
        writer.write_rows(k, t, b.j0, *src);
      }
      for (std::uint8_t f : band_flags) {
        sum.flagged += f != 0;
        sum.valid += (f & quality::masked_any) == 0;
      }
    }
    if (valid_height == 0) {
      std::string when = "time step " + std::to_string(t);
      if (info.time) {
        try {
          when += " (" + reader.date(t).iso() + ")";
        } catch (const Error&) {
        }
      }
      throw InputError(input_message(job.input, info.variable,
                                     "every cell is missing (fill) at " + when));
    }
    sum.steps += 1;
    sum.cells += ny * nx;
  }
  writer.set_global_text("seatilt_status", "complete");
  writer.commit();
  return sum;
}

}  // namespace seatilt
