// Every system of an exact input, shared out over the ranks of a run.
#include <functional>

#include "parallel/distribute.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/exact/two_electron.hpp"

namespace stillpoint {

namespace {

using detail::ByteReader;
using detail::ByteWriter;

void write_optional(ByteWriter& w, const std::optional<double>& v) {
  w.u8(v ? 1 : 0);
  w.f64(v.value_or(0.0));
}
std::optional<double> read_optional(ByteReader& r) {
  const bool has = r.u8() != 0;
  const double v = r.f64();
  return has ? std::optional<double>(v) : std::nullopt;
}
void write_doubles(ByteWriter& w, const std::vector<double>& v) {
  w.u64(v.size());
  for (double x : v) w.f64(x);
}
std::vector<double> read_doubles(ByteReader& r) {
  std::vector<double> v(r.count(8));
  for (double& x : v) x = r.f64();
  return v;
}

// Every member of ExactResult except the system and its mesh, which the receiver rebuilds
// from the input exactly as solve_exact does.
std::string pack_exact(const ExactResult& x) {
  ByteWriter w;
  w.i64(x.electrons);
  w.vec(x.v_ext);
  w.f64(x.nuclear_repulsion);
  w.u64(x.levels.size());
  for (const ExactLevel& L : x.levels) {
    w.str(L.spin);
    w.i64(L.index);
    w.f64(L.energy);
    w.f64(L.residual);
    w.u8(L.bound ? 1 : 0);
    w.vec(L.density);
  }
  w.vec(x.density);
  const ExactEnergyParts& E = x.energy;
  for (double v : {E.total, E.electronic, E.kinetic, E.external, E.electron_electron, E.nuclear_repulsion, E.kinetic_s,
                   E.hartree, E.exchange, E.correlation})
    w.f64(v);
  w.f64(x.energy_minus_one);
  w.f64(x.ks.homo);
  w.f64(x.ks.trust_density);
  w.vec(x.ks.v_s);
  w.str(std::string(x.ks.trusted.begin(), x.ks.trusted.end()));
  w.i64(x.ks.trusted_nodes);
  w.vec(x.ks.orbital);
  w.vec(x.v_h);
  w.vec(x.v_hxc);
  w.vec(x.v_xc);
  w.mat(x.ground_coefficients);
  w.u64(x.grid_checks.size());
  for (const ExactGridCheck& c : x.grid_checks) {
    w.str(c.kind);
    w.i64(c.degree);
    w.f64(c.half_width);
    w.i64(c.nodes);
    write_doubles(w, c.level_changes);
    w.f64(c.homo_change);
    w.f64(c.max_change);
  }
  write_optional(w, x.grid_error_estimate);
  write_doubles(w, x.level_error_estimates);
  write_optional(w, x.threshold);
  w.i64(x.iterations);
  w.i64(x.hamiltonian_products);
  w.i64(x.preconditioner_products);
  w.f64(x.seconds);
  w.f64(x.tolerance_used);
  return w.take();
}

void unpack_exact(const std::string& bytes, ExactResult& x) {
  ByteReader r = detail::message_reader(bytes);
  x.electrons = static_cast<int>(r.i64());
  x.v_ext = r.vec();
  x.nuclear_repulsion = r.f64();
  x.levels.resize(r.count(8));
  for (ExactLevel& L : x.levels) {
    L.spin = r.str();
    L.index = static_cast<int>(r.i64());
    L.energy = r.f64();
    L.residual = r.f64();
    L.bound = r.u8() != 0;
    L.density = r.vec();
  }
  x.density = r.vec();
  ExactEnergyParts& E = x.energy;
  for (double* v : {&E.total, &E.electronic, &E.kinetic, &E.external, &E.electron_electron, &E.nuclear_repulsion,
                    &E.kinetic_s, &E.hartree, &E.exchange, &E.correlation})
    *v = r.f64();
  x.energy_minus_one = r.f64();
  x.ks.homo = r.f64();
  x.ks.trust_density = r.f64();
  x.ks.v_s = r.vec();
  const std::string trusted = r.str();
  x.ks.trusted.assign(trusted.begin(), trusted.end());
  x.ks.trusted_nodes = static_cast<int>(r.i64());
  x.ks.orbital = r.vec();
  x.v_h = r.vec();
  x.v_hxc = r.vec();
  x.v_xc = r.vec();
  x.ground_coefficients = r.mat();
  x.grid_checks.resize(r.count(8));
  for (ExactGridCheck& c : x.grid_checks) {
    c.kind = r.str();
    c.degree = static_cast<int>(r.i64());
    c.half_width = r.f64();
    c.nodes = static_cast<int>(r.i64());
    c.level_changes = read_doubles(r);
    c.homo_change = r.f64();
    c.max_change = r.f64();
  }
  x.grid_error_estimate = read_optional(r);
  x.level_error_estimates = read_doubles(r);
  x.threshold = read_optional(r);
  x.iterations = static_cast<int>(r.i64());
  x.hamiltonian_products = static_cast<int>(r.i64());
  x.preconditioner_products = static_cast<int>(r.i64());
  x.seconds = r.f64();
  x.tolerance_used = r.f64();
  if (!r.at_end()) throw std::logic_error("an exact result sent between ranks has trailing bytes");
}

}  // namespace

std::vector<ExactResult> solve_exact_systems(const ExactInput& in, const Communicator& comm,
                                             const std::function<void(int)>& started) {
  const int n = static_cast<int>(in.systems.size());
  std::vector<std::optional<ExactResult>> out(in.systems.size());
  std::vector<double> cost(in.systems.size(), 1.0);
  const auto errors = detail::distributed_for(
      comm, n, 1, cost,
      [&](int i) {
        const SystemSpec& s = in.systems[i];
        if (started) started(i);
        try {
          out[i].emplace(solve_exact(s, in.options));
        } catch (const InputError& e) {
          if (!e.where().file.empty()) throw;
          throw InputError(in.system_locations[i], "system '" + s.name + "': " + e.what());
        } catch (const NumericalError& e) {
          throw NumericalError("system '" + s.name + "' (" + in.system_locations[i].describe() + "): " + e.what(), e.details());
        }
      },
      [&](int i) { return pack_exact(*out[i]); },
      [&](int i, const std::string& bytes) {
        out[i].emplace(in.systems[i], Mesh::line(in.systems[i].grid));
        unpack_exact(bytes, *out[i]);
      },
      /*stop_at_first_error=*/true);
  for (const auto& e : errors)
    if (e) std::rethrow_exception(e);
  std::vector<ExactResult> results;
  results.reserve(out.size());
  for (auto& r : out) results.push_back(std::move(*r));
  return results;
}

}  // namespace stillpoint
