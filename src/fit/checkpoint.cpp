#include "fit/checkpoint.hpp"

#include <array>
#include <cmath>
#include <cstring>

#include "common/bytes.hpp"
#include "parallel/transport.hpp"
#include "stillpoint/common/errors.hpp"

namespace stillpoint {

namespace {

const char kMagic[] = "STILLPOINT-FIT-CHECKPOINT 2\n";
const char kOldMagic[] = "STILLPOINT-FIT-CHECKPOINT 1\n";

using Writer = detail::ByteWriter;

// Damage can show as a bad checksum or as a length that runs past the end; either way the
// record being read is named.
class Reader : public detail::ByteReader {
 public:
  Reader(const std::string& b, const std::string& file)
      : detail::ByteReader(b, [file](int record) {
          throw InputError(SourceLocation{file, 0, 0, ""},
                           "damaged checkpoint: record " + std::to_string(record) +
                               " is truncated or fails its checksum; delete the file to start over");
        }) {}
};

void write_states(Writer& w, const std::vector<KsSolution>& states) {
  w.begin_record();
  w.u64(states.size());
  w.end_record();
  for (const KsSolution& s : states) {
    w.begin_record();
    w.u64(s.v_s.size());
    for (const auto& v : s.v_s) w.vec(v);
    detail::write_warm_starts(w, s.warm);
    w.end_record();
  }
}

std::vector<KsSolution> read_states(Reader& r) {
  r.begin_record();
  std::vector<KsSolution> out(r.count(8));
  r.end_record();
  for (KsSolution& s : out) {
    r.begin_record();
    s.v_s.resize(r.count(8));
    for (auto& v : s.v_s) v = r.vec();
    s.warm = detail::read_warm_starts(r);
    r.end_record();
  }
  return out;
}

// FNV-1a, 64 bit.
class Hasher {
 public:
  void bytes(const void* p, std::size_t n) {
    const auto* c = static_cast<const unsigned char*>(p);
    for (std::size_t i = 0; i < n; ++i) {
      h_ ^= c[i];
      h_ *= 1099511628211ull;
    }
  }
  void d(double v) { bytes(&v, sizeof v); }
  void i(long long v) { bytes(&v, sizeof v); }
  void s(const std::string& v) {
    i(static_cast<long long>(v.size()));
    bytes(v.data(), v.size());
  }
  void vec(const std::vector<double>& v) {
    i(static_cast<long long>(v.size()));
    bytes(v.data(), sizeof(double) * v.size());
  }
  std::uint64_t value() const { return h_; }

 private:
  std::uint64_t h_ = 1469598103934665603ull;
};

void hash_system(Hasher& h, const SystemSpec& s) {
  h.s(s.name);
  h.i(static_cast<int>(s.geometry));
  h.d(s.charge);
  h.i(s.spin_polarized);
  h.d(s.n_up.value_or(-1.0));
  h.d(s.n_down.value_or(-1.0));
  for (const auto& o : s.occupations) h.vec(o);
  for (const auto& x : s.xc) h.s(x);
  h.vec(s.xc_weights);
  for (const auto& p : s.xc_parameters) h.vec(p);
  for (const auto& f : s.formulas) {
    h.s(f.name);
    h.s(f.expression);
    h.i(f.per_volume);
    h.vec(f.parameter_values);
  }
  h.d(s.density_threshold);
  h.vec(s.nodal_potential);
  h.i(s.grid.degree);
  h.d(s.grid.half_width);
  h.d(s.grid.element_size);
  h.i(s.grid.elements);
  h.d(s.grid.first_element);
  h.i(s.grid.first_element_over_z);
  h.d(s.grid.r_max);
  h.i(s.unoccupied_levels);
  h.i(s.atom.Z);
  for (const auto& sh : s.atom.configuration) {
    h.i(sh.n);
    h.i(sh.l);
    h.d(sh.occupation);
  }
  for (const auto& n : s.line.nuclei) {
    h.d(n.charge);
    h.d(n.position);
    h.d(n.softening);
  }
  for (const auto& p : s.line.potentials) {
    h.i(static_cast<int>(p.kind));
    h.d(p.omega);
    h.d(p.depth);
    h.d(p.center);
    h.d(p.width);
    h.vec(p.table_x);
    h.vec(p.table_v);
  }
  h.d(s.line.electron_softening);
  h.i(s.line.interacting);
  h.d(s.line.nucleus_softening);
}

void hash_terms(Hasher& h, const std::vector<LossTerm>& terms) {
  h.i(static_cast<long long>(terms.size()));
  for (const auto& t : terms) {
    h.i(static_cast<int>(t.kind));
    h.i(t.system);
    h.i(t.system_b);
    h.s(t.state);
    h.i(t.spin);
    h.d(t.target.value_or(0.0));
    h.i(t.target.has_value());
    h.d(t.weight);
    h.vec(t.reference);
    h.vec(t.region);
  }
}

}  // namespace

std::string serialize_checkpoint(const FitCheckpointState& st) {
  Writer w;
  w.raw(kMagic, sizeof kMagic - 1);
  w.begin_record();
  w.u64(st.fingerprint);
  w.f64(st.seconds_before);
  w.u8(st.complete ? 1 : 0);
  w.u64(st.log.size());
  w.end_record();
  for (const FitLogEntry& e : st.log) {
    w.begin_record();
    w.u8(static_cast<std::uint8_t>(e.type));
    w.u8(e.ok ? 1 : 0);
    w.vec(e.theta);
    w.f64(e.loss);
    w.vec(e.gradient);
    w.vec(e.residuals);
    w.mat(e.jacobian);
    w.str(e.reason);
    w.end_record();
  }
  w.begin_record();
  w.u64(st.iterations.size());
  for (const FitIteration& it : st.iterations) {
    w.u64(static_cast<std::uint64_t>(it.iteration));
    w.f64(it.loss);
    w.f64(it.gradient_norm);
    w.f64(it.validation_loss);
    w.f64(it.seconds);
    w.u8(it.step_successful ? 1 : 0);
  }
  w.u64(st.rejected.size());
  for (const auto& r : st.rejected) w.str(r);
  w.end_record();
  write_states(w, st.train_states);
  write_states(w, st.valid_states);
  return w.take();
}

FitCheckpointState parse_checkpoint(const std::string& bytes, const std::string& file) {
  if (bytes.compare(0, sizeof kOldMagic - 1, kOldMagic) == 0)
    throw InputError(SourceLocation{file, 0, 0, ""},
                     "checkpoint of an older format without checksums; delete it to start over");
  if (bytes.compare(0, sizeof kMagic - 1, kMagic) != 0)
    throw InputError(SourceLocation{file, 0, 0, ""}, "not a stillpoint fit checkpoint");
  const std::string body = bytes.substr(sizeof kMagic - 1);
  Reader r(body, file);
  FitCheckpointState st;
  r.begin_record();
  st.fingerprint = r.u64();
  st.seconds_before = r.f64();
  const auto complete = r.u8();
  if (complete > 1) r.fail();
  st.complete = complete != 0;
  st.log.resize(r.count(8));
  r.end_record();
  for (FitLogEntry& e : st.log) {
    r.begin_record();
    const auto t = r.u8();
    if (t > 2) r.fail();
    e.type = static_cast<FitLogEntry::Type>(t);
    e.ok = r.u8() != 0;
    e.theta = r.vec();
    e.loss = r.f64();
    e.gradient = r.vec();
    e.residuals = r.vec();
    e.jacobian = r.mat();
    e.reason = r.str();
    r.end_record();
  }
  r.begin_record();
  st.iterations.resize(r.count(8));
  for (FitIteration& it : st.iterations) {
    it.iteration = static_cast<int>(r.u64());
    it.loss = r.f64();
    it.gradient_norm = r.f64();
    it.validation_loss = r.f64();
    it.seconds = r.f64();
    it.step_successful = r.u8() != 0;
  }
  st.rejected.resize(r.count(8));
  for (auto& s : st.rejected) s = r.str();
  r.end_record();
  st.train_states = read_states(r);
  st.valid_states = read_states(r);
  if (!r.at_end()) r.fail();
  return st;
}

std::uint64_t fit_fingerprint(const FitSpec& spec) {
  Hasher h;
  h.s("fit-1");
  for (const auto& s : spec.systems) hash_system(h, s);
  for (std::size_t i = 0; i < spec.parameters.size(); ++i) {
    const ParameterRef& p = spec.parameters[i];
    h.i(static_cast<int>(p.kind));
    h.i(p.system);
    h.i(p.index);
    h.i(p.sub);
    h.s(p.field);
    h.s(p.name);
    h.d(p.lower);
    h.d(p.upper);
    const FitParameterInfo& in = spec.info[i];
    h.d(in.scale);
    h.d(in.prior.value_or(0.0));
    h.d(in.prior_weight);
    h.d(in.smoothness);
    h.i(in.block);
  }
  hash_terms(h, spec.training);
  hash_terms(h, spec.validation);
  const FitOptions& o = spec.options;
  h.i(static_cast<int>(o.optimizer));
  h.d(o.gradient_tolerance);
  h.d(o.step_tolerance);
  h.d(o.loss_tolerance);
  h.i(o.lbfgs_rank);
  const ScfOptions& scf = spec.gradient.scf;
  h.i(scf.max_iterations);
  h.d(scf.potential_tolerance);
  h.d(scf.energy_tolerance);
  h.d(scf.eigenvalue_tolerance);
  h.d(scf.mixing);
  h.i(scf.history);
  const ResponseOptions& r = spec.gradient.response;
  h.i(static_cast<int>(r.chi0));
  h.i(r.sum_over_states_below);
  h.d(r.sternheimer_tolerance);
  h.d(r.krylov_tolerance);
  h.d(r.krylov_floor);
  h.d(spec.gradient.density_threshold);
  return h.value();
}

}  // namespace stillpoint
