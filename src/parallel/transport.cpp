#include "parallel/transport.hpp"

#include "parallel/distribute.hpp"

namespace stillpoint::detail {

namespace {

void write_vectors(ByteWriter& w, const std::vector<Eigen::VectorXd>& vs) {
  w.u64(vs.size());
  for (const auto& v : vs) w.vec(v);
}

std::vector<Eigen::VectorXd> read_vectors(ByteReader& r) {
  std::vector<Eigen::VectorXd> vs(r.count(8));
  for (auto& v : vs) v = r.vec();
  return vs;
}

}  // namespace

void write_warm_starts(ByteWriter& w, const std::vector<EigenWarmStart>& warm) {
  w.u64(warm.size());
  for (const EigenWarmStart& e : warm) {
    w.f64(e.lower_bound);
    w.vec(e.previous.values);
    w.mat(e.previous.vectors);
  }
}

std::vector<EigenWarmStart> read_warm_starts(ByteReader& r) {
  std::vector<EigenWarmStart> warm(r.count(8));
  for (EigenWarmStart& e : warm) {
    e.lower_bound = r.f64();
    e.previous.values = r.vec();
    e.previous.vectors = r.mat();
  }
  return warm;
}

// Every member of KsSolution (and of what it holds) is listed here; the round-trip test
// (ParallelTransport.SolutionRoundTripIsExact) compares a solution's full report and JSON.
void write_solution(ByteWriter& w, const KsSolution& s) {
  w.u64(s.states.size());
  for (const ChannelStates& c : s.states) {
    w.vec(c.energies);
    w.mat(c.orbitals);
  }
  write_vectors(w, s.density);
  write_vectors(w, s.v_s);
  write_vectors(w, s.v_xc);
  w.vec(s.v_h);
  w.vec(s.v_ext);
  const EnergyParts& E = s.energy;
  for (double v : {E.total, E.kinetic, E.external, E.hartree, E.xc, E.nuclear_repulsion, E.band}) w.f64(v);
  w.u64(s.levels.size());
  for (const Level& lv : s.levels) {
    w.str(lv.label);
    w.i64(lv.channel);
    w.i64(lv.index);
    w.i64(lv.spin);
    w.i64(lv.l);
    w.f64(lv.energy);
    w.f64(lv.occupation);
    w.u8(lv.settled ? 1 : 0);
  }
  w.u64(s.history.size());
  for (const ScfStep& h : s.history) {
    w.i64(h.iteration);
    w.f64(h.energy);
    w.f64(h.residual);
    w.f64(h.eigenvalue_change);
  }
  write_warm_starts(w, s.warm);
  w.i64(s.iterations);
  w.f64(s.residual_floor);
}

KsSolution read_solution(ByteReader& r) {
  KsSolution s;
  s.states.resize(r.count(16));
  for (ChannelStates& c : s.states) {
    c.energies = r.vec();
    c.orbitals = r.mat();
  }
  s.density = read_vectors(r);
  s.v_s = read_vectors(r);
  s.v_xc = read_vectors(r);
  s.v_h = r.vec();
  s.v_ext = r.vec();
  EnergyParts& E = s.energy;
  for (double* v : {&E.total, &E.kinetic, &E.external, &E.hartree, &E.xc, &E.nuclear_repulsion, &E.band}) *v = r.f64();
  s.levels.resize(r.count(8));
  for (Level& lv : s.levels) {
    lv.label = r.str();
    lv.channel = static_cast<int>(r.i64());
    lv.index = static_cast<int>(r.i64());
    lv.spin = static_cast<int>(r.i64());
    lv.l = static_cast<int>(r.i64());
    lv.energy = r.f64();
    lv.occupation = r.f64();
    lv.settled = r.u8() != 0;
  }
  s.history.resize(r.count(32));
  for (ScfStep& h : s.history) {
    h.iteration = static_cast<int>(r.i64());
    h.energy = r.f64();
    h.residual = r.f64();
    h.eigenvalue_change = r.f64();
  }
  s.warm = read_warm_starts(r);
  s.iterations = static_cast<int>(r.i64());
  s.residual_floor = r.f64();
  return s;
}

std::string pack_solution(const KsSolution& s) {
  ByteWriter w;
  write_solution(w, s);
  return w.take();
}

KsSolution unpack_solution(const std::string& bytes) {
  ByteReader r = message_reader(bytes);
  KsSolution s = read_solution(r);
  if (!r.at_end()) throw std::logic_error("a solution sent between ranks has trailing bytes");
  return s;
}

}  // namespace stillpoint::detail
