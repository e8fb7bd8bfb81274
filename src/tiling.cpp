// tiling.cpp — row bands and the streaming `currents` pipeline (see tiling.hpp).
//
// Notation: t time step; j global row; band rows [j0, j0 + n); velocity rows
// [v0, v1) = band +- hd (diagnostic halo); height rows [e0, e1) = velocity
// rows +- hv (velocity halo), all clipped to [0, ny). A "slab" is one output
// chunk row: rows [c * cr, c * cr + rows) of step t, cr = Writer::chunk_rows().
//
// Threads (tiling.hpp "Threads"): the calling thread makes every netCDF-C
// and HDF5 call (fetch heights, store chunks); a team of --threads OpenMP
// threads runs everything else as tasks:
//   decode   one task per input chunk to inflate (FetchedRows::run_task)
//   unpack   row blocks of heights: stored values -> metres, NaN missing
//   kernel   row blocks of u, v and quality flags (GeostrophicKernel)
//   kin      row blocks of the diagnostics (KinematicsKernel); converts the
//            nine outputs to their stored types straight into the slabs
//   encode   one task per slab and variable: pack, shuffle, deflate (Writer)
// A band's stages run in this order; tasks of older bands go first, so the
// compression of band k overlaps the arithmetic of band k+1 while the I/O
// thread stores band k-1 and fetches band k+2.
#include "seatilt/tiling.hpp"

#include <netcdf.h>
#include <omp.h>

#include <algorithm>
#include <atomic>
#include <cmath>
#include <condition_variable>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <exception>
#include <functional>
#include <map>
#include <memory>
#include <mutex>
#include <new>
#include <optional>
#include <stdexcept>
#include <thread>

#include "seatilt/diagnostics.hpp"
#include "seatilt/error.hpp"
#include "seatilt/product.hpp"

namespace seatilt {

namespace {

/// Rows per kernel / diagnostics / unpack task: enough work per task
/// (~0.1-1 ms) to make scheduling cheap, small enough to balance two to a
/// few dozen threads (rule of thumb, no source).
constexpr std::size_t block_rows = 16;

/// Bands held at once: one being fetched and decoded while the previous one
/// is computed and compressed (the memory model in tiling.hpp counts two).
constexpr std::size_t bands_in_flight = 2;

/// Bytes per cell of one band row in flight (tiling.hpp memory model):
/// fetched input 8, heights 8, u and v 16, flags 1, output slabs 33
/// (8 float32 + 1 byte), their compressed copies ~20.
constexpr double bytes_per_cell = 86.0;

/// Bands are kept to about this many bytes (by the model above) even when
/// the budget allows more: small bands stay in the caches and reuse the
/// same pages, and were measured as fast or faster on the project's
/// machine (docs/performance.md).
constexpr double efficient_band_bytes = 24.0 * (1 << 20);

/// Uninitialised bytes (never zero-filled: first touched by the tasks that
/// fill them, in parallel). From 1 MiB on, whole 2 MiB pages aligned to 2 MiB
/// and advised for transparent huge pages (chunkio::advise_huge).
class Buffer {
public:
  Buffer() = default;
  explicit Buffer(std::size_t n) : size_(n) {
    constexpr std::size_t huge = std::size_t{2} << 20;
    void* p = nullptr;
    if (n >= huge / 2) {
      capacity_ = (n + huge - 1) / huge * huge;
      p = std::aligned_alloc(huge, capacity_);
      if (p != nullptr) chunkio::advise_huge(p, capacity_);
    } else {
      capacity_ = n;
      p = std::malloc(std::max<std::size_t>(n, 1));
    }
    if (p == nullptr) throw std::bad_alloc();
    p_.reset(static_cast<unsigned char*>(p));
  }
  [[nodiscard]] unsigned char* data() { return p_.get(); }
  [[nodiscard]] const unsigned char* data() const { return p_.get(); }
  [[nodiscard]] std::size_t size() const { return size_; }
  [[nodiscard]] std::size_t capacity() const { return capacity_; }
  void resize(std::size_t n) { size_ = n; }  // n <= capacity()

private:
  struct Free {
    void operator()(unsigned char* p) const { std::free(p); }
  };
  std::unique_ptr<unsigned char, Free> p_;
  std::size_t size_ = 0, capacity_ = 0;
};

std::size_t capacity_bytes(const Buffer& b) { return b.capacity(); }
template <class T>
std::size_t capacity_bytes(const std::vector<T>& v) {
  return v.capacity() * sizeof(T);
}
std::size_t capacity_bytes(const EncodedRows& e) {
  std::size_t n = e.values.capacity();
  for (const auto& c : e.chunks) n += c.capacity();
  return n;
}

/// Large buffers kept between bands and between the inputs of one process
/// (a batch), up to the memory budget: touching fresh memory costs more than
/// most of the arithmetic on this machine (docs/performance.md), so each
/// page is faulted in once per process, not once per band.
class Recycler {
public:
  static Recycler& get() {
    static Recycler r;
    return r;
  }
  void set_limit(std::size_t bytes) {
    std::lock_guard<std::mutex> lock(m_);
    limit_ = bytes;
  }
  Buffer buffer(std::size_t n) {
    Buffer b;
    if (!take(buffers_, n, b)) return Buffer(n);
    b.resize(n);
    return b;
  }
  std::vector<double> doubles(std::size_t n) {
    std::vector<double> v;
    take(doubles_, n * sizeof(double), v);
    chunkio::resize_huge(v, n);
    return v;
  }
  std::vector<std::uint8_t> flags(std::size_t n) {
    std::vector<std::uint8_t> v;
    take(flags_, n, v);
    chunkio::resize_huge(v, n);
    return v;
  }
  /// Encoded rows of output variable VAR last time: chunk buffers of the
  /// right sizes, reused without reallocation.
  EncodedRows encoded(std::size_t var) {
    EncodedRows e;
    std::lock_guard<std::mutex> lock(m_);
    if (var < encoded_.size() && !encoded_[var].empty()) {
      e = std::move(encoded_[var].back());
      encoded_[var].pop_back();
      held_ -= capacity_bytes(e);
    }
    return e;
  }
  void put(Buffer&& b) { give(buffers_, std::move(b)); }
  void put(std::vector<double>&& v) { give(doubles_, std::move(v)); }
  void put(std::vector<std::uint8_t>&& v) { give(flags_, std::move(v)); }
  void put(EncodedRows&& e) {
    const std::size_t bytes = capacity_bytes(e), var = e.var;
    std::lock_guard<std::mutex> lock(m_);
    if (bytes == 0 || held_ + bytes > limit_) return;
    if (encoded_.size() <= var) encoded_.resize(var + 1);
    held_ += bytes;
    encoded_[var].push_back(std::move(e));
  }

private:
  /// Moves the smallest kept item of at least BYTES capacity into OUT.
  template <class T>
  bool take(std::vector<T>& shelf, std::size_t bytes, T& out) {
    std::lock_guard<std::mutex> lock(m_);
    std::size_t best = shelf.size();
    for (std::size_t k = 0; k < shelf.size(); ++k)
      if (capacity_bytes(shelf[k]) >= bytes &&
          (best == shelf.size() || capacity_bytes(shelf[k]) < capacity_bytes(shelf[best])))
        best = k;
    if (best == shelf.size()) return false;
    held_ -= capacity_bytes(shelf[best]);
    out = std::move(shelf[best]);
    shelf.erase(shelf.begin() + static_cast<std::ptrdiff_t>(best));
    return true;
  }
  template <class T>
  void give(std::vector<T>& shelf, T&& item) {
    const std::size_t bytes = capacity_bytes(item);
    std::lock_guard<std::mutex> lock(m_);
    if (bytes == 0 || held_ + bytes > limit_) return;  // freed by the caller's temporary
    held_ += bytes;
    shelf.push_back(std::move(item));
  }

  std::mutex m_;
  std::size_t limit_ = 0, held_ = 0;
  std::vector<Buffer> buffers_;
  std::vector<std::vector<double>> doubles_;
  std::vector<std::vector<std::uint8_t>> flags_;
  std::vector<std::vector<EncodedRows>> encoded_;  // by output variable
};

/// Which computed array an output variable takes its values from.
enum class Source : std::uint8_t {
  u, v, speed, vorticity, strain_normal, strain_shear, strain, okubo_weiss, quality
};

Source source_of(const OutputVariable& var) {
  const std::string& n = var.name;
  if (n == "quality") return Source::quality;
  if (n == "u") return Source::u;
  if (n == "v") return Source::v;
  if (n == "speed") return Source::speed;
  if (n == "vorticity") return Source::vorticity;
  if (n == "strain_normal") return Source::strain_normal;
  if (n == "strain_shear") return Source::strain_shear;
  if (n == "strain") return Source::strain;
  if (n == "okubo_weiss") return Source::okubo_weiss;
  throw std::logic_error("run_currents: no data for field " + n);
}

/// One output chunk row of every variable, filled by the kin tasks of the
/// bands that cover it, then encoded and stored.
struct Slab {
  std::size_t seq = 0, t = 0, j0 = 0, rows = 0;
  Buffer values;                                   // every variable's rows x nx stored values
  std::vector<std::size_t> offset;                 // of each variable in values
  std::vector<EncodedRows> encoded;                // per variable
  std::atomic<std::size_t> rows_left{0};
  std::atomic<std::size_t> vars_left{0};
  bool ready = false;  // guarded by Pipeline::m_
};

/// One band of one time step in flight.
struct BandWork {
  std::size_t index = 0, t = 0;
  Band b;
  std::size_t v0 = 0, v1 = 0, e0 = 0, e1 = 0;
  FetchedRows fetched;
  bool fetched_done = false;    // guarded by Pipeline::m_
  bool decode_started = false;  // guarded by Pipeline::m_
  Field eta, u, v;
  std::vector<std::uint8_t> kflags;  // kernel flags of rows [v0, v1)
  std::vector<std::shared_ptr<Slab>> slabs;
  std::size_t c0 = 0;  // chunk row of slabs[0]
  std::atomic<std::size_t> left{0};
  std::atomic<std::size_t> valid_height{0}, valid{0}, flagged{0};
};

using BandPtr = std::shared_ptr<BandWork>;

/// Reads the environment override SEATILT_CHUNK_IO (docs/performance.md):
/// "netcdf" = raw chunk reads and direct chunk writes off; "zlib" = zlib
/// instead of libdeflate; unset or anything else = defaults.
void apply_environment(ReaderOptions& reader, WriterSettings& writer) {
  const char* v = std::getenv("SEATILT_CHUNK_IO");
  if (v == nullptr) return;
  const std::string mode = v;
  if (mode == "netcdf") {
    reader.raw_chunks = false;
    writer.chunk_writes = ChunkWrites::netcdf;
  } else if (mode == "zlib") {
    writer.codec = chunkio::Codec::zlib;
  }
}

/// The velocity step of the pipeline (GeostrophicKernel or
/// CurvilinearGeostrophicKernel behind one interface).
class VelocityStep {
public:
  virtual ~VelocityStep() = default;
  [[nodiscard]] virtual std::size_t halo_rows() const = 0;
  virtual void compute(const Field& eta, std::size_t e0, std::size_t j0, std::size_t n, Field& u,
                       Field& v, std::vector<std::uint8_t>& flags) const = 0;
};
template <class Kernel>
class VelocityStepOf final : public VelocityStep {
public:
  explicit VelocityStepOf(const Kernel& k) : k_(k) {}
  [[nodiscard]] std::size_t halo_rows() const override { return k_.halo_rows(); }
  void compute(const Field& eta, std::size_t e0, std::size_t j0, std::size_t n, Field& u, Field& v,
               std::vector<std::uint8_t>& flags) const override {
    k_.compute(eta, e0, j0, n, u, v, flags);
  }

private:
  const Kernel& k_;
};

/// The diagnostics step (KinematicsKernel or CurvilinearKinematicsKernel).
class KinematicsStep {
public:
  virtual ~KinematicsStep() = default;
  [[nodiscard]] virtual std::size_t halo_rows() const = 0;
  virtual void compute(const Field& u, const Field& v, std::size_t b0, std::size_t j0,
                       std::size_t n, Kinematics& out, std::vector<std::uint8_t>& flags) const = 0;
};
template <class Kernel>
class KinematicsStepOf final : public KinematicsStep {
public:
  explicit KinematicsStepOf(const Kernel& k) : k_(k) {}
  [[nodiscard]] std::size_t halo_rows() const override { return k_.halo_rows(); }
  void compute(const Field& u, const Field& v, std::size_t b0, std::size_t j0, std::size_t n,
               Kinematics& out, std::vector<std::uint8_t>& flags) const override {
    k_.compute(u, v, b0, j0, n, out, flags);
  }

private:
  const Kernel& k_;
};

class Pipeline {
public:
 Pipeline(const CurrentsJob& job, Reader& reader, Writer& writer, const VelocityStep& kernel,
          const KinematicsStep& kinematics, const std::vector<OutputVariable>& variables,
          std::size_t rows, int threads)
     : job_(job),
       reader_(reader),
       writer_(writer),
       kernel_(kernel),
       kinematics_(kinematics),
       info_(reader.info()),
       ny_(reader.info().ny),
       nx_(reader.info().nx),
       nt_(reader.info().nt),
       hv_(kernel.halo_rows()),
       hd_(kinematics.halo_rows()),
       cr_(writer.chunk_rows()),
       threads_(std::max(1, threads)),
       bands_(plan_bands(ny_, rows)) {
   for (const OutputVariable& var : variables) {
     sources_.push_back(source_of(var));
     elem_.push_back(var.type == OutputType::float32 ? sizeof(float) : 1);
   }
   steps_valid_ = std::vector<std::atomic<std::size_t>>(nt_);
   steps_left_ = std::vector<std::atomic<std::size_t>>(nt_);
   for (auto& s : steps_left_) s = bands_.size();
 }

  CurrentsSummary run();

private:
  struct Task {
    std::size_t priority = 0, seq = 0;
    std::function<void()> fn;
  };

  // ---- task pool (OpenMP team) ----
  void submit(std::size_t priority, std::function<void()> fn);
  void worker();
  void fail(std::exception_ptr e);
  /// Runs TASK(k) for k < N as tasks of BAND, then THEN once (on the worker
  /// that finished last).
  void stage(const BandPtr& band, std::size_t n, std::function<void(std::size_t)> task,
             std::function<void()> then);

  // ---- band stages ----
  void start_decode(const BandPtr& band);
  void on_decoded(const BandPtr& band);
  void unpack_block(BandWork& band, std::size_t k);
  void on_unpacked(const BandPtr& band);
  void kernel_block(BandWork& band, std::size_t k);
  void kin_block(BandWork& band, std::size_t k);
  void on_kin(const BandPtr& band);
  void encode_slab(const std::shared_ptr<Slab>& slab, std::size_t priority);

  // ---- I/O thread ----
  BandPtr make_band(std::size_t index);
  bool fetch(const BandPtr& band);

  const CurrentsJob& job_;
  Reader& reader_;
  Writer& writer_;
  const VelocityStep& kernel_;
  const KinematicsStep& kinematics_;
  const HeightInfo& info_;
  const std::size_t ny_, nx_, nt_, hv_, hd_, cr_;
  const int threads_;
  const std::vector<Band> bands_;
  std::vector<Source> sources_;
  std::vector<std::size_t> elem_;

  std::mutex m_;
  std::condition_variable work_cv_, io_cv_;
  std::vector<Task> queue_;  // heap: lowest (priority, seq) on top
  std::size_t task_seq_ = 0;
  bool shutdown_ = false;
  bool aborted_ = false;
  std::exception_ptr error_;
  std::optional<std::size_t> empty_step_;

  std::map<std::size_t, BandPtr> in_flight_;           // by band index
  std::size_t next_decode_ = 0;                        // band whose decode may start next
  std::map<std::size_t, std::shared_ptr<Slab>> slabs_;  // by slab seq, until stored
  std::size_t bands_done_ = 0;
  std::vector<std::atomic<std::size_t>> steps_valid_, steps_left_;
  std::atomic<std::size_t> valid_{0}, flagged_{0};
};

// ---- task pool -----------------------------------------------------------------------

void Pipeline::submit(std::size_t priority, std::function<void()> fn) {
  std::lock_guard<std::mutex> lock(m_);
  queue_.push_back({priority, task_seq_++, std::move(fn)});
  std::push_heap(queue_.begin(), queue_.end(), [](const Task& a, const Task& b) {
    return a.priority != b.priority ? a.priority > b.priority : a.seq > b.seq;
  });
  work_cv_.notify_one();
}

void Pipeline::worker() {
  for (;;) {
    Task task;
    {
      std::unique_lock<std::mutex> lock(m_);
      work_cv_.wait(lock, [&] { return shutdown_ || !queue_.empty(); });
      if (queue_.empty()) return;
      std::pop_heap(queue_.begin(), queue_.end(), [](const Task& a, const Task& b) {
        return a.priority != b.priority ? a.priority > b.priority : a.seq > b.seq;
      });
      task = std::move(queue_.back());
      queue_.pop_back();
      if (aborted_) continue;  // drain without running
    }
    try {
      task.fn();
    } catch (...) {
      fail(std::current_exception());
    }
  }
}

void Pipeline::fail(std::exception_ptr e) {
  std::lock_guard<std::mutex> lock(m_);
  if (!error_) error_ = std::move(e);
  aborted_ = true;
  io_cv_.notify_all();
}

void Pipeline::stage(const BandPtr& band, std::size_t n, std::function<void(std::size_t)> task,
                     std::function<void()> then) {
  if (n == 0) {
    submit(band->index, std::move(then));
    return;
  }
  band->left.store(n);
  auto shared_then = std::make_shared<std::function<void()>>(std::move(then));
  auto shared_task = std::make_shared<std::function<void(std::size_t)>>(std::move(task));
  for (std::size_t k = 0; k < n; ++k) {
    submit(band->index, [band, k, shared_task, shared_then] {
      (*shared_task)(k);
      if (band->left.fetch_sub(1, std::memory_order_acq_rel) == 1) (*shared_then)();
    });
  }
}

// ---- band stages ------------------------------------------------------------------------

void Pipeline::start_decode(const BandPtr& band) {
  stage(
      band, band->fetched.tasks(), [band](std::size_t k) { band->fetched.run_task(k); },
      [this, band] { on_decoded(band); });
}

void Pipeline::on_decoded(const BandPtr& band) {
  BandPtr next;
  {
    // Chunks shared with the next band were decoded by this one: only now
    // may the next band decode (and use) them.
    std::lock_guard<std::mutex> lock(m_);
    next_decode_ = band->index + 1;
    auto it = in_flight_.find(next_decode_);
    if (it != in_flight_.end() && it->second->fetched_done && !it->second->decode_started) {
      next = it->second;
      next->decode_started = true;
    }
  }
  if (next) start_decode(next);
  band->eta.ny = band->e1 - band->e0;
  band->eta.nx = nx_;
  band->eta.data = Recycler::get().doubles(band->eta.ny * nx_);
  const std::size_t blocks = (band->e1 - band->e0 + block_rows - 1) / block_rows;
  stage(
      band, blocks, [this, band](std::size_t k) { unpack_block(*band, k); },
      [this, band] { on_unpacked(band); });
}

void Pipeline::unpack_block(BandWork& band, std::size_t k) {
  const std::size_t r0 = k * block_rows, r1 = std::min(band.e1 - band.e0, r0 + block_rows);
  reader_.unpack_rows(band.fetched, r0, r1, band.eta);
  // Heights present in the band's own rows (an all-missing step is an error).
  std::size_t valid = 0;
  for (std::size_t r = r0; r < r1; ++r) {
    const std::size_t j = band.e0 + r;
    if (j < band.b.j0 || j >= band.b.j0 + band.b.n) continue;
    const double* row = band.eta.row(r);
    for (std::size_t i = 0; i < nx_; ++i) valid += !std::isnan(row[i]);
  }
  band.valid_height.fetch_add(valid, std::memory_order_relaxed);
}

void Pipeline::on_unpacked(const BandPtr& band) {
  band->fetched = FetchedRows();  // stored bytes and decoded chunks no longer needed here
  const std::size_t t = band->t;
  steps_valid_[t].fetch_add(band->valid_height.load(), std::memory_order_acq_rel);
  if (steps_left_[t].fetch_sub(1, std::memory_order_acq_rel) == 1 && steps_valid_[t].load() == 0) {
    std::lock_guard<std::mutex> lock(m_);
    if (!error_) {
      empty_step_ = t;
      error_ = std::make_exception_ptr(std::runtime_error("empty step"));
    }
    aborted_ = true;
    io_cv_.notify_all();
    return;
  }
  const std::size_t nv = band->v1 - band->v0;
  for (Field* f : {&band->u, &band->v}) {
    f->ny = nv;
    f->nx = nx_;
    f->data = Recycler::get().doubles(nv * nx_);
  }
  band->kflags = Recycler::get().flags(nv * nx_);
  const std::size_t blocks = (nv + block_rows - 1) / block_rows;
  stage(
      band, blocks, [this, band](std::size_t k) { kernel_block(*band, k); },
      [this, band] {
        Recycler::get().put(std::move(band->eta.data));
        band->eta = Field();
        const std::size_t kin_blocks = (band->b.n + block_rows - 1) / block_rows;
        stage(
            band, kin_blocks, [this, band](std::size_t k) { kin_block(*band, k); },
            [this, band] { on_kin(band); });
      });
}

void Pipeline::kernel_block(BandWork& band, std::size_t k) {
  thread_local Field u, v;
  thread_local std::vector<std::uint8_t> flags;
  const std::size_t j = band.v0 + k * block_rows, n = std::min(block_rows, band.v1 - j);
  kernel_.compute(band.eta, band.e0, j, n, u, v, flags);
  const std::size_t at = (j - band.v0) * nx_;
  std::copy(u.data.begin(), u.data.end(), band.u.data.begin() + static_cast<std::ptrdiff_t>(at));
  std::copy(v.data.begin(), v.data.end(), band.v.data.begin() + static_cast<std::ptrdiff_t>(at));
  std::copy(flags.begin(), flags.end(), band.kflags.begin() + static_cast<std::ptrdiff_t>(at));
}

void Pipeline::kin_block(BandWork& band, std::size_t k) {
  thread_local Kinematics kin;
  thread_local std::vector<std::uint8_t> flags;
  const std::size_t j = band.b.j0 + k * block_rows;
  const std::size_t n = std::min(block_rows, band.b.j0 + band.b.n - j);
  const auto from = band.kflags.begin() + static_cast<std::ptrdiff_t>((j - band.v0) * nx_);
  flags.assign(from, from + static_cast<std::ptrdiff_t>(n * nx_));
  kinematics_.compute(band.u, band.v, band.v0, j, n, kin, flags);

  std::size_t valid = 0, flagged = 0;
  for (std::uint8_t f : flags) {
    flagged += f != 0;
    valid += (f & quality::masked_any) == 0;
  }
  band.valid.fetch_add(valid, std::memory_order_relaxed);
  band.flagged.fetch_add(flagged, std::memory_order_relaxed);

  // Rows j .. j+n-1 of every output, converted to the stored types, into the slabs.
  for (std::size_t r = 0; r < n; ++r) {
    const std::size_t row = j + r;
    Slab& slab = *band.slabs[row / cr_ - band.c0];
    const std::size_t sr = row - slab.j0;
    for (std::size_t var = 0; var < sources_.size(); ++var) {
      unsigned char* dst = slab.values.data() + slab.offset[var] + sr * nx_ * elem_[var];
      const double* src = nullptr;
      switch (sources_[var]) {
        case Source::quality: std::memcpy(dst, flags.data() + r * nx_, nx_); continue;
        case Source::u: src = band.u.row(row - band.v0); break;
        case Source::v: src = band.v.row(row - band.v0); break;
        case Source::speed: src = kin.speed.row(r); break;
        case Source::vorticity: src = kin.vorticity.row(r); break;
        case Source::strain_normal: src = kin.strain_normal.row(r); break;
        case Source::strain_shear: src = kin.strain_shear.row(r); break;
        case Source::strain: src = kin.strain.row(r); break;
        case Source::okubo_weiss: src = kin.okubo_weiss.row(r); break;
      }
      for (std::size_t i = 0; i < nx_; ++i) {
        const float f = output_float(src[i]);
        std::memcpy(dst + i * sizeof(float), &f, sizeof(float));
      }
    }
  }
  // Count the rows per slab; the block that completes a slab starts its encoding.
  for (std::size_t r = 0; r < n;) {
    Slab& slab = *band.slabs[(j + r) / cr_ - band.c0];
    const std::size_t upto = std::min(n, slab.j0 + slab.rows - j);
    if (slab.rows_left.fetch_sub(upto - r, std::memory_order_acq_rel) == upto - r)
      encode_slab(band.slabs[(j + r) / cr_ - band.c0], band.index);
    r = upto;
  }
}

void Pipeline::on_kin(const BandPtr& band) {
  Recycler::get().put(std::move(band->u.data));
  Recycler::get().put(std::move(band->v.data));
  Recycler::get().put(std::move(band->kflags));
  band->u = Field();
  band->v = Field();
  valid_.fetch_add(band->valid.load(), std::memory_order_relaxed);
  flagged_.fetch_add(band->flagged.load(), std::memory_order_relaxed);
  std::lock_guard<std::mutex> lock(m_);
  in_flight_.erase(band->index);
  ++bands_done_;
  io_cv_.notify_all();
}

void Pipeline::encode_slab(const std::shared_ptr<Slab>& slab, std::size_t priority) {
  slab->vars_left.store(sources_.size());
  for (std::size_t var = 0; var < sources_.size(); ++var) {
    submit(priority, [this, slab, var] {
      writer_.encode_rows(var, slab->t, slab->j0, slab->rows,
                          slab->values.data() + slab->offset[var], slab->encoded[var]);
      if (slab->vars_left.fetch_sub(1, std::memory_order_acq_rel) == 1) {
        Recycler::get().put(std::move(slab->values));
        std::lock_guard<std::mutex> lock(m_);
        slab->ready = true;
        io_cv_.notify_all();
      }
    });
  }
}

// ---- I/O thread ----------------------------------------------------------------------------

BandPtr Pipeline::make_band(std::size_t index) {
  auto band = std::make_shared<BandWork>();
  band->index = index;
  band->t = index / bands_.size();
  band->b = bands_[index % bands_.size()];
  const Band& b = band->b;
  band->v0 = b.j0 >= hd_ ? b.j0 - hd_ : 0;
  band->v1 = std::min(ny_, b.j0 + b.n + hd_);
  band->e0 = band->v0 >= hv_ ? band->v0 - hv_ : 0;
  band->e1 = std::min(ny_, band->v1 + hv_);
  return band;
}

bool Pipeline::fetch(const BandPtr& band) {
  reader_.fetch_rows(band->t, band->e0, band->e1 - band->e0, band->fetched);
  // Output slabs (chunk rows) that this band writes into; shared with the
  // neighbouring band when bands are not aligned to chunk rows.
  const std::size_t chunk_rows_per_step = (ny_ + cr_ - 1) / cr_;
  band->c0 = band->b.j0 / cr_;
  const std::size_t c1 = (band->b.j0 + band->b.n - 1) / cr_;
  std::lock_guard<std::mutex> lock(m_);
  for (std::size_t c = band->c0; c <= c1; ++c) {
    const std::size_t seq = band->t * chunk_rows_per_step + c;
    auto& slab = slabs_[seq];
    if (!slab) {
      slab = std::make_shared<Slab>();
      slab->seq = seq;
      slab->t = band->t;
      slab->j0 = c * cr_;
      slab->rows = std::min(cr_, ny_ - slab->j0);
      slab->rows_left = slab->rows;
      std::size_t bytes = 0;
      for (std::size_t var = 0; var < sources_.size(); ++var) {
        slab->offset.push_back(bytes);
        bytes += slab->rows * nx_ * elem_[var];
        slab->encoded.push_back(Recycler::get().encoded(var));
      }
      slab->values = Recycler::get().buffer(bytes);
    }
    band->slabs.push_back(slab);
  }
  band->fetched_done = true;
  // Decoding starts here when the band before is decoded already, else in
  // on_decoded of that band; decode_started makes sure it starts once.
  if (band->index == next_decode_ && !band->decode_started) {
    band->decode_started = true;
    return true;
  }
  return false;
}

CurrentsSummary Pipeline::run() {
  const std::size_t total_bands = bands_.size() * nt_;
  const std::size_t total_slabs = ((ny_ + cr_ - 1) / cr_) * nt_;

  // The OpenMP team runs on its own thread, so that this one stays free for
  // the library calls. Inside a task, nested parallel regions (the kernels'
  // own `omp parallel for`) get one thread.
  std::thread team([this] {
#pragma omp parallel num_threads(threads_)
    {
      omp_set_num_threads(1);
      worker();
    }
  });

  std::size_t next_fetch = 0, next_store = 0;
  try {
    for (;;) {
      std::unique_lock<std::mutex> lock(m_);
      io_cv_.wait(lock, [&] {
        if (aborted_) return true;
        if (next_store == total_slabs && bands_done_ == total_bands) return true;
        auto it = slabs_.find(next_store);
        if (it != slabs_.end() && it->second->ready) return true;
        return next_fetch < total_bands && in_flight_.size() < bands_in_flight;
      });
      if (aborted_) break;
      if (next_store == total_slabs && bands_done_ == total_bands) break;
      auto it = slabs_.find(next_store);
      if (it != slabs_.end() && it->second->ready) {
        std::shared_ptr<Slab> slab = it->second;
        slabs_.erase(it);
        lock.unlock();
        // Stored in a fixed order: the file is the same for any thread count.
        for (const EncodedRows& rows : slab->encoded) writer_.store(rows);
        for (EncodedRows& rows : slab->encoded) Recycler::get().put(std::move(rows));
        ++next_store;
        continue;
      }
      BandPtr band = make_band(next_fetch);
      in_flight_[band->index] = band;
      lock.unlock();
      if (job_.between_bands) job_.between_bands();
      if (fetch(band)) start_decode(band);
      ++next_fetch;
    }
  } catch (...) {
    fail(std::current_exception());
  }

  {
    std::lock_guard<std::mutex> lock(m_);
    shutdown_ = true;
    work_cv_.notify_all();
  }
  team.join();

  if (error_) {
    if (empty_step_) {
      const std::size_t t = *empty_step_;
      std::string when = "time step " + std::to_string(t);
      if (info_.time) {
        try {
          when += " (" + reader_.date(t).iso() + ")";
        } catch (const Error&) {
        }
      }
      throw InputError(input_message(job_.input, info_.variable,
                                     "every cell is missing (fill) at " + when));
    }
    std::rethrow_exception(error_);
  }

  CurrentsSummary sum;
  sum.steps = nt_;
  sum.cells = nt_ * ny_ * nx_;
  sum.valid = valid_.load();
  sum.flagged = flagged_.load();
  sum.band_rows = bands_.empty() ? 0 : bands_.front().n;
  return sum;
}

// ---- projected and curvilinear grids (docs/projected.md) -------------------------------

/// Great-circle distance (m) between two positions (degrees) on the mean
/// radius R1 (haversine; enough for a consistency check).
double distance_m(double lat1, double lon1, double lat2, double lon2) {
  constexpr double deg = 3.14159265358979323846 / 180.0;
  const double dphi = (lat2 - lat1) * deg, dlam = std::remainder(lon2 - lon1, 360.0) * deg;
  const double h =
      std::sin(dphi / 2) * std::sin(dphi / 2) +
      std::cos(lat1 * deg) * std::cos(lat2 * deg) * std::sin(dlam / 2) * std::sin(dlam / 2);
  return 2.0 * earth::mean_radius * std::asin(std::min(1.0, std::sqrt(h)));
}

Attribute replaced_number(const std::string& name, double value) {
  return number_attribute(name, NC_DOUBLE, {value});
}

/// A name for an added variable: WANT unless INFO already uses it, else ALT.
std::string free_name(const HeightInfo& info, const std::vector<OutputVariable>& vars,
                      const std::string& want, const std::string& alt) {
  const auto used = [&](const std::string& n) {
    if (n == info.lat.name || n == info.lon.name || (info.time && n == info.time->name))
      return true;
    if (info.grid_mapping_var && n == info.grid_mapping_var->name) return true;
    for (const OutputVariable& v : vars)
      if (v.name == n) return true;
    return false;
  };
  return used(want) ? alt : want;
}

/// The 2-D latitude or longitude written to the output: the file's own
/// (curvilinear), or the grid's nodes under the file's name when it had one.
AuxVar output_aux(const std::optional<AuxVar>& in, const std::vector<double>& values,
                  const std::string& name, bool latitude) {
  AuxVar a;
  a.nc_type = NC_DOUBLE;
  a.values = values;
  if (in) {
    a.name = in->name;
    a.attrs = in->attrs;
    return a;
  }
  a.name = name;
  a.attrs = {text_attribute("standard_name", latitude ? "latitude" : "longitude"),
             text_attribute("long_name",
                            latitude ? "latitude of the grid node" : "longitude of the grid node"),
             text_attribute("units", latitude ? "degrees_north" : "degrees_east")};
  return a;
}

CurrentsSummary run_currents_plane(const CurrentsJob& job, Reader& reader, WriterSettings ws,
                                   std::optional<Writer>& pending) {
  const HeightInfo& info = reader.info();
  // Node positions and metrics (48 B/node, grid.hpp), copies of 2-D lat/lon, one band row.
  require_memory(112.0 * static_cast<double>(info.ny) * static_cast<double>(info.nx) +
                     band_pipeline_bytes(info.nx, 1, 0),
                 "the grid of " + std::to_string(info.ny) + " x " + std::to_string(info.nx) +
                     " nodes",
                 job.input, info.variable);
  const CurvilinearGrid grid = make_curvilinear_grid(info, job.options.earth);
  const CurvilinearGeostrophicKernel kernel(grid, job.options);
  const CurvilinearKinematicsKernel kinematics(grid, job.options.order, job.options.coast);
  const std::size_t hv = kernel.halo_rows(), hd = kinematics.halo_rows();
  const std::size_t ny = grid.ny(), nx = grid.nx();

  auto variables = currents_variables(job.fields, info.kind);
  HeightInfo layout = info;
  layout.lat2d =
      output_aux(info.lat2d, grid.lat_deg(), free_name(info, variables, "lat", "node_lat"), true);
  layout.lon2d =
      output_aux(info.lon2d, grid.lon_deg(), free_name(info, variables, "lon", "node_lon"), false);
  for (OutputVariable& v : variables) {
    if (layout.grid_mapping_var)
      v.attrs.push_back(text_attribute("grid_mapping", layout.grid_mapping_var->name));
    v.attrs.push_back(text_attribute("coordinates", layout.lat2d->name + " " + layout.lon2d->name));
  }

  ws.global_attrs = currents_global_attributes(info, job.options, job.command_line);
  double lat_lo = 90, lat_hi = -90, lon_lo = 360, lon_hi = -360;
  for (std::size_t k = 0; k < ny * nx; ++k) {
    lat_lo = std::min(lat_lo, grid.lat_deg()[k]);
    lat_hi = std::max(lat_hi, grid.lat_deg()[k]);
    lon_lo = std::min(lon_lo, grid.lon_deg()[k]);
    lon_hi = std::max(lon_hi, grid.lon_deg()[k]);
  }
  std::string description =
      "curvilinear: 2-D latitude/longitude " + layout.lat2d->name + ", " + layout.lon2d->name;
  std::string figure;
  if (const Projection* p = grid.projection()) {
    description = "projected: " + p->name() + " (" + p->definition() + ")";
    for (const auto& kv : p->parameters())
      if (kv.first == "ellipsoid") figure = "projection ellipsoid, " + kv.second;
  }
  for (Attribute& a : ws.global_attrs) {
    if (a.name == "geospatial_lat_min") a = replaced_number(a.name, lat_lo);
    if (a.name == "geospatial_lat_max") a = replaced_number(a.name, lat_hi);
    if (a.name == "geospatial_lon_min") a = replaced_number(a.name, lon_lo);
    if (a.name == "geospatial_lon_max") a = replaced_number(a.name, lon_hi);
    if (a.name == "geostrophy_earth_model" && !figure.empty()) a = text_attribute(a.name, figure);
  }
  ws.global_attrs.push_back(text_attribute("geostrophy_grid", description));
  Writer writer(job.output, layout, variables, ws);

  const std::size_t rows =
      job.band_rows > 0
          ? std::min(job.band_rows, ny)
          : band_rows_for_budget(nx, ny, hv + hd, job.memory_bytes, writer.chunk_rows());
  const VelocityStepOf<CurvilinearGeostrophicKernel> velocity_step(kernel);
  const KinematicsStepOf<CurvilinearKinematicsKernel> kinematics_step(kinematics);
  Pipeline pipeline(job, reader, writer, velocity_step, kinematics_step, variables, rows,
                    omp_get_max_threads());
  CurrentsSummary sum = pipeline.run();
  sum.read_path = reader.read_path();
  sum.write_path = writer.write_path();
  writer.set_global_text("seatilt_status", "complete");
  writer.close();
  pending.emplace(std::move(writer));
  return sum;
}

}  // namespace

CurvilinearGrid make_curvilinear_grid(const HeightInfo& info, EarthModel earth) {
  if (info.grid_kind == GridKind::projected) {
    const std::string var = info.grid_mapping_var ? info.grid_mapping_var->name : info.variable;
    std::optional<CurvilinearGrid> grid;
    try {
      grid.emplace(info.grid_mapping, info.x_m, info.y_m);
    } catch (const std::invalid_argument& e) {
      throw InputError(input_message(info.path, var, e.what()));
    }
    if (info.lat2d && info.lon2d && info.lat2d->values.size() == grid->lat_deg().size() &&
        info.lon2d->values.size() == grid->lon_deg().size()) {
      // The file's 2-D latitude/longitude must be the projection's nodes (CF 5.6).
      double worst = 0;
      std::size_t at = 0;
      for (std::size_t k = 0; k < grid->lat_deg().size(); ++k) {
        const double la = info.lat2d->values[k], lo = info.lon2d->values[k];
        if (std::isnan(la) || std::isnan(lo)) continue;
        const double d = distance_m(la, lo, grid->lat_deg()[k], grid->lon_deg()[k]);
        if (d > worst) {
          worst = d;
          at = k;
        }
      }
      if (worst > 0.25 * grid->spacing_m()) {
        char buf[64];
        std::snprintf(buf, sizeof buf, "%.0f m", worst);
        throw InputError(input_message(
            info.path, info.lat2d->name,
            "latitude/longitude (" + info.lat2d->name + ", " + info.lon2d->name +
                ") disagree with grid mapping " + var + ": node (row " +
                std::to_string(at / grid->nx()) + ", column " + std::to_string(at % grid->nx()) +
                ") lies " + buf + " from where " + grid->projection()->name() +
                " puts it (more than a quarter of the grid spacing)"));
      }
    }
    return std::move(*grid);
  }
  if (info.grid_kind == GridKind::curvilinear && info.lat2d && info.lon2d) {
    try {
      return CurvilinearGrid(info.ny, info.nx, info.lat2d->values, info.lon2d->values, earth);
    } catch (const std::invalid_argument& e) {
      throw InputError(input_message(info.path, info.lat2d->name, e.what()));
    }
  }
  throw InputError(
      input_message(info.path, info.variable, "not a projected or curvilinear grid (internal)"));
}

std::vector<Band> plan_bands(std::size_t ny, std::size_t rows) {
  if (rows == 0) throw std::invalid_argument("plan_bands: rows must be >= 1");
  std::vector<Band> bands;
  for (std::size_t j = 0; j < ny; j += rows) bands.push_back({j, std::min(rows, ny - j)});
  return bands;
}

std::size_t band_rows_for_budget(std::size_t nx, std::size_t ny, std::size_t h,
                                 std::size_t memory_bytes, std::size_t align) {
  align = std::max<std::size_t>(align, 1);
  // bytes(R) = 2 bands x nx x (86 R + 50 h)  (tiling.hpp memory model)
  const double nbands = static_cast<double>(bands_in_flight);
  const double per_row = nbands * static_cast<double>(nx) * bytes_per_cell;
  const double fixed = nbands * static_cast<double>(nx) * static_cast<double>(h) * 50.0;
  const double r = (static_cast<double>(memory_bytes) - fixed) / per_row;
  auto rows = r < 1.0 ? std::size_t{1} : static_cast<std::size_t>(r);
  rows = std::max(align, rows / align * align);
  return std::min(rows, std::max<std::size_t>(ny, 1));
}

CurrentsSummary run_currents(const CurrentsJob& job) {
  std::optional<Writer> pending;
  CurrentsSummary sum = run_currents_unpublished(job, pending);
  pending->publish();
  return sum;
}

CurrentsSummary run_currents_unpublished(const CurrentsJob& job, std::optional<Writer>& pending) {
  pending.reset();
  validate(job.options);
  ReaderOptions reader_options = job.reader;
  WriterSettings ws = job.writer;
  apply_environment(reader_options, ws);
  reader_options.horizontal_grids = true;  // projected and curvilinear inputs too
  Reader reader(job.input, reader_options);
  const HeightInfo& info = reader.info();
  if (info.grid_kind != GridKind::lat_lon)
    return run_currents_plane(job, reader, std::move(ws), pending);
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
  const std::size_t hv = kernel.halo_rows();      // heights around velocity rows
  const std::size_t hd = kinematics.halo_rows();  // velocities around diagnostic rows
  const std::size_t ny = grid.ny(), nx = grid.nx();

  ws.global_attrs = currents_global_attributes(info, job.options, job.command_line);
  const auto variables = currents_variables(job.fields, info.kind);
  Writer writer(job.output, info, variables, ws);

  std::size_t rows = std::min(job.band_rows, ny);
  if (job.band_rows == 0) {
    const std::size_t align = writer.chunk_rows();
    rows = band_rows_for_budget(nx, ny, hv + hd, job.memory_bytes, align);
    const auto efficient = static_cast<std::size_t>(
        efficient_band_bytes / (bytes_per_cell * static_cast<double>(nx)));
    rows = std::min(rows, std::max(align, efficient / align * align));
  }

  // Refuse before any band is allocated (resources.hpp; docs/hardening.md).
  require_memory(band_pipeline_bytes(nx, rows, hv + hd) + 32.0 * static_cast<double>(ny + nx),
                 "row bands of " + std::to_string(rows) + " x " + std::to_string(nx) + " cells",
                 job.input, info.variable, job.band_rows > 0 ? "try a smaller --rows" : "");
  Recycler::get().set_limit(job.memory_bytes);
  const VelocityStepOf<GeostrophicKernel> velocity_step(kernel);
  const KinematicsStepOf<KinematicsKernel> kinematics_step(kinematics);
  Pipeline pipeline(job, reader, writer, velocity_step, kinematics_step, variables, rows,
                    omp_get_max_threads());
  CurrentsSummary sum = pipeline.run();
  sum.read_path = reader.read_path();
  sum.write_path = writer.write_path();
  writer.set_global_text("seatilt_status", "complete");
  writer.close();
  pending.emplace(std::move(writer));
  return sum;
}

}  // namespace seatilt
