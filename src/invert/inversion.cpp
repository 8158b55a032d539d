// Kohn–Sham inversion (see include/stillpoint/inversion.hpp for the mathematics).
#include "stillpoint/invert/inversion.hpp"
#include "common/toml_input.hpp"

#include <Eigen/Cholesky>
#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <numbers>
#include <sstream>

#include "stillpoint/numerics/eigensolver.hpp"
#include "stillpoint/xc/formula.hpp"
#include "stillpoint/numerics/hartree.hpp"
#include "stillpoint/numerics/kinetic.hpp"
#include "stillpoint/ks/problem.hpp"
#include "stillpoint/xc/model_functional.hpp"
#include "stillpoint/xc/on_mesh.hpp"
#include "stillpoint/ks/xc_terms.hpp"
#include "numerics/interpolation.hpp"

namespace stillpoint {

// ---------------------------------------------------------------------------------------------
// Target densities
// ---------------------------------------------------------------------------------------------

namespace {

std::string trim(const std::string& s) {
  const auto a = s.find_first_not_of(" \t\r\n");
  if (a == std::string::npos) return "";
  const auto b = s.find_last_not_of(" \t\r\n");
  return s.substr(a, b - a + 1);
}

std::vector<std::string> split_fields(const std::string& line) {
  std::vector<std::string> out;
  std::string cur;
  bool any_comma = line.find(',') != std::string::npos;
  for (char ch : line) {
    const bool sep = any_comma ? ch == ',' : (ch == ' ' || ch == '\t');
    if (sep) {
      if (any_comma || !cur.empty()) out.push_back(trim(cur));
      cur.clear();
    } else {
      cur += ch;
    }
  }
  if (any_comma || !trim(cur).empty()) out.push_back(trim(cur));
  return out;
}

bool parse_number(const std::string& s, double& v) {
  if (s.empty()) return false;
  char* end = nullptr;
  v = std::strtod(s.c_str(), &end);
  return end && *end == '\0';
}

std::string lower(std::string s) {
  for (char& c : s) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  return s;
}


std::string fmt(const char* f, double v) {
  char buf[64];
  std::snprintf(buf, sizeof buf, f, v);
  return buf;
}

}  // namespace

std::vector<double> electrons_per_spin(const SystemSpec& system) {
  SystemSpec s = system;
  s.xc.clear();
  s.xc_weights.clear();
  s.xc_parameters.clear();
  const KsProblem P(s);
  std::vector<double> e(P.nspin(), 0.0);
  for (const Channel& c : P.channels())
    for (double f : c.occupations) e[c.spin] += f;
  return e;
}

TargetDensity target_on_mesh(const std::vector<double>& x, const std::vector<std::vector<double>>& n, const Mesh& mesh,
                             const std::vector<double>& electrons, const std::string& source, const SourceLocation& where) {
  TargetDensity t;
  t.source = source;
  const int N = mesh.num_nodes();
  const int ns = static_cast<int>(n.size());
  const bool radial = mesh.geometry() == Geometry::Radial;
  const Eigen::VectorXd& X = mesh.x();
  const Eigen::VectorXd& W = mesh.density_weight();
  if (x.size() < 2) throw InputError(where, source + ": a density table needs at least two rows");
  // Exact node match: every interior node (and radially every node but r = 0) is a table row.
  std::vector<int> match(N, -1);
  bool exact = true;
  {
    std::size_t j = 0;
    for (int k = 0; k < N; ++k) {
      const double tol = 1e-9 * std::max(1.0, std::abs(X(k)));
      while (j < x.size() && x[j] < X(k) - tol) ++j;
      if (j < x.size() && std::abs(x[j] - X(k)) <= tol) match[k] = static_cast<int>(j);
      const bool needed = !(radial && k == 0) && k != N - 1 && !(k == 0 && !radial);
      if (needed && match[k] < 0) exact = false;
    }
  }
  t.exact_nodes = exact;
  t.covered.assign(N, true);
  t.density.assign(ns, Eigen::VectorXd::Zero(N));
  const double x0 = x.front(), x1 = x.back();
  int below = 0, above = 0;
  bool used_log = true;
  for (int s = 0; s < ns; ++s) {
    // Strictly positive tables: cubic spline of log n. Otherwise (zeros in the table): monotone
    // cubic Hermite of n itself.
    const bool positive = std::all_of(n[s].begin(), n[s].end(), [](double v) { return v > 0; });
    used_log = used_log && positive;
    std::vector<double> logn;
    if (positive)
      for (double v : n[s]) logn.push_back(std::log(v));
    const detail::MonotoneCubic hermite(x, n[s]);
    const detail::NaturalSpline spline(x, positive ? logn : n[s]);
    auto interp = [&](double xv) { return positive ? std::exp(spline(xv)) : hermite(xv); };
    for (int k = 0; k < N; ++k) {
      const double xk = X(k);
      double value;
      if (exact && match[k] >= 0) {
        value = n[s][match[k]];
      } else if (xk >= x0 && xk <= x1) {
        value = interp(xk);
      } else {
        const bool low = xk < x0;
        if (s == 0 && !(radial && k == 0)) (low ? below : above)++;
        if (!(radial && k == 0)) t.covered[k] = false;
        // Exponential continuation of the two end rows (decay only); radially below the first
        // row the density is finite, so its value is held.
        const std::size_t a = low ? 0 : x.size() - 1, b = low ? 1 : x.size() - 2;
        const double ya = n[s][a], yb = n[s][b];
        if (radial && low) {
          value = ya;
        } else if (ya > 0 && yb > ya) {
          const double rate = std::log(yb / ya) / std::abs(x[b] - x[a]);
          value = ya * std::exp(-rate * std::abs(xk - x[a]));
        } else {
          value = ya;
        }
      }
      t.density[s](k) = std::max(0.0, value);
    }
    // Dirichlet ends carry no orbital: no density there.
    t.density[s](N - 1) = 0.0;
    if (!radial) t.density[s](0) = 0.0;
  }
  if (below + above > 0) {
    std::ostringstream w;
    w << source << ": the table covers " << (radial ? "r" : "x") << " in [" << x0 << ", " << x1 << "] bohr but the grid spans ["
      << X(0) << ", " << X(N - 1) << "] bohr; " << below + above
      << " node(s) outside were filled by exponential continuation of the end rows and are never flagged trustworthy";
    t.warnings.push_back(w.str());
  }
  if (!exact)
    t.warnings.push_back(source + ": positions are not the grid nodes; the density was interpolated (" +
                         (used_log ? std::string("cubic spline of log n") : std::string("monotone cubic Hermite")) + ")");
  t.electrons_in_table = 0.0;
  for (int s = 0; s < ns; ++s) {
    const double got = W.dot(t.density[s]);
    t.electrons_in_table += got;
    const double want = electrons[s];
    if (!(got > 0)) throw InputError(where, source + ": the target density integrates to zero on the grid");
    if (std::abs(got - want) > 0.02 * want) {
      std::ostringstream m;
      m << source << ": the target density holds " << got << " electrons" << (ns == 2 ? (s == 0 ? " (spin up)" : " (spin down)") : "")
        << " on this grid but the system has " << want;
      if (radial) {
        double radial_integral = 0.0;  // ∫ n dr: a file holding 4πr²n instead of n?
        for (int k = 0; k < N; ++k) radial_integral += mesh.w()(k) * t.density[s](k);
        if (std::abs(radial_integral - want) < 0.02 * want)
          m << "; the column looks like the radial distribution 4 pi r^2 n, but n itself (per bohr^3) is expected";
      }
      m << "; check the system's charge and the file's units";
      throw InputError(where, m.str());
    }
    t.scale = want / got;
    t.density[s] *= t.scale;
    if (std::abs(t.scale - 1.0) > 1e-8)
      t.warnings.push_back(source + ": the target held " + fmt("%.10g", got) + " electrons on the grid; scaled by " +
                           fmt("%.10g", t.scale) + " to " + fmt("%.10g", want));
  }
  return t;
}

TargetDensity read_target_density(const std::string& path, const Mesh& mesh, const std::vector<double>& electrons,
                                  const SourceLocation& where, const std::string& column) {
  std::istringstream f = detail::open_table(path, "cannot open the target density file '" + path + "'", where);
  const int ns = static_cast<int>(electrons.size());
  const bool radial = mesh.geometry() == Geometry::Radial;
  std::string line;
  int lineno = 0;
  std::vector<std::string> header;
  int xcol = 0;
  std::vector<int> ncol;
  std::vector<double> x;
  std::vector<std::vector<double>> n(ns);
  auto at = [&](int l, const std::string& msg) {
    SourceLocation s{path, l, 0, ""};
    return InputError(s, msg + " (target file named by " + where.describe() + ")");
  };
  bool columns_known = false;
  auto choose_columns = [&](int width, int l) {
    if (header.empty()) {
      xcol = 0;
      ncol.clear();
      for (int s = 0; s < ns; ++s) ncol.push_back(1 + s);
      if (width < 1 + ns)
        throw at(l, "expected " + std::to_string(1 + ns) + " columns (position" + (ns == 2 ? ", n_up, n_down)" : ", density)"));
      return;
    }
    std::vector<std::string> h;
    for (const auto& s : header) h.push_back(lower(s));
    xcol = 0;
    for (const char* name : {"x_bohr", "r_bohr", "x", "r"}) {
      auto it = std::find(h.begin(), h.end(), name);
      if (it != h.end()) {
        xcol = static_cast<int>(it - h.begin());
        break;
      }
    }
    const std::string xname = h[xcol];
    if (radial && (xname == "x_bohr" || xname == "x"))
      throw at(l, "the table holds a line density (column '" + header[xcol] + "') but the system is an atom");
    if (!radial && (xname == "r_bohr" || xname == "r"))
      throw at(l, "the table holds a radial density (column '" + header[xcol] + "') but the system is a line system");
    ncol.clear();
    auto find_name = [&](const std::string& want) -> int {
      for (std::size_t i = 0; i < h.size(); ++i)
        if (h[i] == lower(want)) return static_cast<int>(i);
      return -1;
    };
    if (!column.empty()) {
      if (ns == 2) throw at(l, "invert.column names one density column; a spin-polarized target needs n_up and n_down columns");
      const int c = find_name(column);
      if (c < 0) {
        const std::string near = nearest_word(column, header);
        throw at(l, "no column named '" + column + "'" + (near.empty() ? "" : "; did you mean '" + near + "'?"));
      }
      ncol.push_back(c);
    } else if (ns == 1) {
      int c = -1;
      for (const char* name : {"n_per_bohr", "n_per_bohr3", "n", "density"})
        if ((c = find_name(name)) >= 0) break;
      if (c < 0)
        for (std::size_t i = 0; i < h.size(); ++i)
          if (static_cast<int>(i) != xcol && !h[i].empty() && h[i][0] == 'n' && h[i].rfind("n_up", 0) != 0 &&
              h[i].rfind("n_down", 0) != 0) {
            c = static_cast<int>(i);
            break;
          }
      if (c < 0) throw at(l, "no density column found (expected n_per_bohr, n_per_bohr3, n or density; or set invert.column)");
      ncol.push_back(c);
    } else {
      for (const char* prefix : {"n_up", "n_down"}) {
        int c = -1;
        for (std::size_t i = 0; i < h.size(); ++i)
          if (h[i].rfind(prefix, 0) == 0) {
            c = static_cast<int>(i);
            break;
          }
        if (c < 0) throw at(l, std::string("a spin-polarized system needs a column starting with '") + prefix + "'");
        ncol.push_back(c);
      }
    }
    if (radial && (h[ncol[0]] == "n_per_bohr" || h[ncol[0]].find("per_bohr3") == std::string::npos) &&
        h[ncol[0]].find("per_bohr") != std::string::npos)
      throw at(l, "column '" + header[ncol[0]] + "' is a line density (per bohr) but the system is an atom (per bohr^3)");
    if (!radial && h[ncol[0]].find("per_bohr3") != std::string::npos)
      throw at(l, "column '" + header[ncol[0]] + "' is a density per bohr^3 but the system is a line system (per bohr)");
  };
  while (std::getline(f, line)) {
    ++lineno;
    const std::string tl = trim(line);
    if (tl.empty() || tl[0] == '#') continue;
    const std::vector<std::string> fields = split_fields(tl);
    double first;
    if (!columns_known && !parse_number(fields[0], first)) {
      header = fields;
      choose_columns(static_cast<int>(fields.size()), lineno);
      columns_known = true;
      continue;
    }
    if (!columns_known) {
      choose_columns(static_cast<int>(fields.size()), lineno);
      columns_known = true;
    }
    double xv;
    const int need = std::max(xcol, *std::max_element(ncol.begin(), ncol.end())) + 1;
    if (static_cast<int>(fields.size()) < need)
      throw at(lineno, "expected at least " + std::to_string(need) + " columns, found " + std::to_string(fields.size()));
    if (!parse_number(fields[xcol], xv) || !std::isfinite(xv))
      throw at(lineno, "position '" + detail::printable(fields[xcol]) + "' is not a finite number");
    if (!x.empty() && !(xv > x.back())) throw at(lineno, "positions must increase strictly from row to row");
    if (radial && xv < 0) throw at(lineno, "radial positions must be non-negative");
    x.push_back(xv);
    for (int s = 0; s < ns; ++s) {
      double nv;
      if (!parse_number(fields[ncol[s]], nv) || !std::isfinite(nv))
        throw at(lineno, "density '" + detail::printable(fields[ncol[s]]) + "' is not a finite number");
      if (nv < 0) {
        if (nv > -1e-14) nv = 0.0;  // rounding noise of a tail
        else throw at(lineno, "density " + fields[ncol[s]] + " is negative");
      }
      n[s].push_back(nv);
    }
  }
  if (x.size() < 2) throw at(lineno, "the target density file has fewer than two data rows");
  TargetDensity t = target_on_mesh(x, n, mesh, electrons, path, where);
  if (!header.empty()) {
    t.position_column = header[xcol];
    for (std::size_t i = 0; i < ncol.size(); ++i) t.density_columns += (i ? "," : "") + header[ncol[i]];
  }
  return t;
}

// ---------------------------------------------------------------------------------------------
// The non-interacting map with every eigenpair
// ---------------------------------------------------------------------------------------------

namespace {

struct ChannelEigen {
  Eigen::VectorXd eps;  // all eigenvalues
  Eigen::MatrixXd c;    // all eigenvectors, scaled basis (interior nodes)
};

struct Evaluation {
  std::vector<ChannelEigen> eig;
  std::vector<ChannelStates> states;
  std::vector<Eigen::VectorXd> density;
  double band = 0.0;
};

class Engine {
 public:
  explicit Engine(const SystemSpec& spec) : P_(noninteracting(spec)) {
    const Mesh& m = P_.mesh();
    nu_ = m.num_unknowns();
    sqrt_w_ = m.w().segment(1, nu_).array().sqrt();
    for (const Channel& c : P_.channels()) {
      while (static_cast<int>(T_.size()) <= c.l) T_.push_back(Eigen::MatrixXd(scaled_kinetic(m, static_cast<int>(T_.size()))));
    }
  }
  static SystemSpec noninteracting(SystemSpec s) {
    s.line.interacting = false;
    s.xc.clear();
    s.xc_weights.clear();
    s.xc_parameters.clear();
    return s;
  }
  const KsProblem& problem() const { return P_; }
  int nu() const { return nu_; }

  Evaluation evaluate(const std::vector<Eigen::VectorXd>& v) const {
    Evaluation r;
    const Mesh& m = P_.mesh();
    for (std::size_t ci = 0; ci < P_.channels().size(); ++ci) {
      const Channel& ch = P_.channels()[ci];
      Eigen::MatrixXd H = T_[ch.l];
      H.diagonal() += v[ch.spin].segment(1, nu_);
      Eigenpairs ep = dense_lowest_eigenpairs(H, nu_);
      ChannelStates st;
      st.energies = ep.values.head(ch.states);
      st.orbitals = Eigen::MatrixXd::Zero(m.num_nodes(), ch.states);
      for (int i = 0; i < ch.states; ++i) {
        Eigen::VectorXd u = ep.vectors.col(i).cwiseQuotient(sqrt_w_);
        if (u.sum() < 0) u = -u;
        st.orbitals.col(i).segment(1, nu_) = u;
      }
      for (std::size_t i = 0; i < ch.occupations.size(); ++i) r.band += ch.occupations[i] * ep.values(i);
      r.states.push_back(std::move(st));
      r.eig.push_back({std::move(ep.values), std::move(ep.vectors)});
    }
    r.density = P_.density(r.states);
    return r;
  }

  // Pair coefficients g_ij of the response of channel ci (docs/theory.md §5.1): per occupied i,
  // 2 (f_i − f_j) / (ε_i − ε_j), every pair counted once.
  Eigen::MatrixXd pair_coefficients(const Evaluation& e, std::size_t ci) const {
    const Channel& ch = P_.channels()[ci];
    const Eigen::VectorXd& eps = e.eig[ci].eps;
    const int nocc = static_cast<int>(ch.occupations.size());
    Eigen::MatrixXd g = Eigen::MatrixXd::Zero(nu_, nocc);
    for (int i = 0; i < nocc; ++i) {
      const double fi = ch.occupations[i];
      for (int j = 0; j < nu_; ++j) {
        if (j == i) continue;
        const double fj = j < nocc ? ch.occupations[j] : 0.0;
        if (j < nocc && j < i) continue;
        if (fi == fj) continue;
        const double gap = eps(i) - eps(j);
        if (std::abs(gap) < 1e-10) {
          std::ostringstream msg;
          msg << "the response is singular: states " << ch.labels.at(std::min(i, ch.states - 1)) << " and " << j + 1
              << " of a channel are degenerate (" << gap << " Ha apart) but differently occupied; the target is not "
              << "non-interacting v-representable with these fixed occupations";
          throw NumericalError(msg.str());
        }
        g(j, i) = 2.0 * (fi - fj) / gap;
      }
    }
    return g;
  }

  /// A = diag(W) χ0 on the interior nodes of spin s.
  Eigen::MatrixXd hessian(const Evaluation& e, int s) const {
    Eigen::MatrixXd A = Eigen::MatrixXd::Zero(nu_, nu_);
    for (std::size_t ci = 0; ci < P_.channels().size(); ++ci) {
      const Channel& ch = P_.channels()[ci];
      if (ch.spin != s) continue;
      const Eigen::MatrixXd g = pair_coefficients(e, ci);
      const Eigen::MatrixXd& C = e.eig[ci].c;
      for (int i = 0; i < static_cast<int>(ch.occupations.size()); ++i) {
        if (ch.occupations[i] == 0.0) continue;
        const Eigen::MatrixXd B = (C * g.col(i).asDiagonal()) * C.transpose();
        const Eigen::VectorXd ci_vec = C.col(i);
        A.noalias() += (ci_vec * ci_vec.transpose()).cwiseProduct(B);
      }
    }
    return A;
  }

 private:
  KsProblem P_;
  int nu_ = 0;
  Eigen::VectorXd sqrt_w_;
  std::vector<Eigen::MatrixXd> T_;
};

// Stiffness matrix of the smoothness penalty ∫ |∇Δ|² (line: dx, radial: 4π r² dr) over all nodes.
Eigen::MatrixXd stiffness(const Mesh& m) {
  const int N = m.num_nodes(), p = m.degree();
  Eigen::MatrixXd K = Eigen::MatrixXd::Zero(N, N);
  const bool radial = m.geometry() == Geometry::Radial;
  for (int e = 0; e < m.num_elements(); ++e) {
    const Eigen::MatrixXd D = m.element_derivative(e);
    Eigen::VectorXd w = m.element_weights(e);
    if (radial)
      for (int q = 0; q <= p; ++q) {
        const double r = m.x()(m.node(e, q));
        w(q) *= 4.0 * std::numbers::pi * r * r;
      }
    const Eigen::MatrixXd Ke = D.transpose() * w.asDiagonal() * D;
    K.block(m.node(e, 0), m.node(e, 0), p + 1, p + 1) += Ke;
  }
  return K;
}

double edge_value(const Mesh& m, const Eigen::VectorXd& d) {
  const int N = m.num_nodes();
  return m.geometry() == Geometry::Radial ? d(N - 1) : 0.5 * (d(0) + d(N - 1));
}

struct Errors {
  double l1 = 0.0, max = 0.0;
};

Errors density_errors(const Mesh& m, const std::vector<Eigen::VectorXd>& n, const std::vector<Eigen::VectorXd>& t) {
  Errors e;
  const int first = m.geometry() == Geometry::Radial ? 1 : 0;
  for (std::size_t s = 0; s < n.size(); ++s) {
    const Eigen::VectorXd d = (n[s] - t[s]).cwiseAbs();
    e.l1 += m.density_weight().dot(d);
    e.max = std::max(e.max, d.segment(first, d.size() - first).maxCoeff());
  }
  return e;
}

// Solves S x = b for symmetric positive definite S (Jacobi-equilibrated Cholesky, LDLT fallback).
Eigen::VectorXd spd_solve(const Eigen::MatrixXd& S, const Eigen::VectorXd& b) {
  const Eigen::VectorXd d = S.diagonal().cwiseAbs().cwiseMax(1e-300).cwiseSqrt().cwiseInverse();
  const Eigen::MatrixXd Ss = d.asDiagonal() * S * d.asDiagonal();
  Eigen::LLT<Eigen::MatrixXd> llt(Ss);
  Eigen::VectorXd y;
  if (llt.info() == Eigen::Success) {
    y = llt.solve(d.cwiseProduct(b));
  } else {
    Eigen::LDLT<Eigen::MatrixXd> ldlt(Ss);
    y = ldlt.solve(d.cwiseProduct(b));
  }
  return d.cwiseProduct(y);
}

}  // namespace

Eigen::VectorXd single_orbital_potential(const Mesh& mesh, const Eigen::VectorXd& n, double occupation) {
  const int nu = mesh.num_unknowns();
  const Eigen::VectorXd c = (mesh.density_weight().segment(1, nu).cwiseProduct(n.segment(1, nu)) / occupation).cwiseSqrt();
  const Eigen::VectorXd Tc = scaled_kinetic(mesh, 0) * c;
  Eigen::VectorXd v = Eigen::VectorXd::Zero(mesh.num_nodes());
  for (int k = 0; k < nu; ++k) v(k + 1) = c(k) > 0 ? -Tc(k) / c(k) : 0.0;
  return v;
}

Eigen::MatrixXd wu_yang_hessian(const SystemSpec& system, const std::vector<Eigen::VectorXd>& v, int spin) {
  const Engine E(system);
  return E.hessian(E.evaluate(v), spin);
}

// ---------------------------------------------------------------------------------------------
// The inversion
// ---------------------------------------------------------------------------------------------

InversionResult invert_density(const SystemSpec& system, const std::vector<Eigen::VectorXd>& target,
                               const InversionOptions& opt, const std::vector<bool>& covered) {
  const auto t0 = std::chrono::steady_clock::now();
  using Form = InversionOptions::Form;
  using ReferencePotential = InversionOptions::ReferencePotential;
  const Engine E(system);
  const KsProblem& P = E.problem();
  const Mesh& m = P.mesh();
  const int N = m.num_nodes(), nu = E.nu(), ns = P.nspin();
  const bool radial = m.geometry() == Geometry::Radial;
  const Eigen::VectorXd& W = m.density_weight();
  if (static_cast<int>(target.size()) != ns)
    throw InputError("the target has " + std::to_string(target.size()) + " spin densities; the system needs " +
                     std::to_string(ns));
  for (const auto& t : target)
    if (t.size() != N || !t.allFinite() || t.minCoeff() < 0)
      throw InputError("the target density must be finite and non-negative at each of the " + std::to_string(N) +
                       " grid nodes");
  const bool per_spin = !opt.spin_ionization_energies.empty();
  if (per_spin) {
    if (opt.constant != InversionOptions::Constant::Ionization)
      throw InputError("ionization energies per spin are used only with constant = \"ionization\"");
    if (static_cast<int>(opt.spin_ionization_energies.size()) != ns)
      throw InputError("ionization energies per spin: the system has " + std::to_string(ns) + " spin channel" +
                       (ns == 1 ? "" : "s") + ", " + std::to_string(opt.spin_ionization_energies.size()) + " were given");
    for (double I : opt.spin_ionization_energies)
      if (!std::isfinite(I)) throw InputError("ionization energies per spin must be finite (hartree)");
  } else if (opt.constant == InversionOptions::Constant::Ionization && !(std::isfinite(opt.ionization_energy))) {
    throw InputError("constant = \"ionization\" needs a finite ionization_energy (hartree)");
  }
  if (opt.regularization < 0 || !(opt.density_tolerance > 0) || !(opt.trust_threshold >= 0) ||
      !(opt.regularization_factor > 1) || !(opt.regularization_start > 0))
    throw InputError("inversion options out of range (regularization >= 0, density_tolerance > 0, factor > 1)");

  // Target, normalized per spin exactly to the occupations (the constant direction must be a
  // null direction of the objective), with nothing at the Dirichlet nodes.
  const std::vector<double> Ns = electrons_per_spin(system);
  std::vector<Eigen::VectorXd> nt = target;
  Eigen::VectorXd nt_tot = Eigen::VectorXd::Zero(N);
  for (int s = 0; s < ns; ++s) {
    nt[s](N - 1) = 0.0;
    if (!radial) nt[s](0) = 0.0;
    const double got = W.dot(nt[s]);
    if (!(got > 0)) throw InputError("the target density is zero on the grid");
    nt[s] *= Ns[s] / got;
    nt_tot += nt[s];
  }
  const double Ntot = W.dot(nt_tot);

  InversionResult R;
  R.target = nt;
  R.v_ext = P.external_potential();
  R.v_h = Eigen::VectorXd::Zero(N);
  const bool need_h = opt.form == Form::Interacting || opt.reference_potential != ReferencePotential::ExternalOnly;
  if (need_h) {
    const Hartree H(m, radial ? 0.0 : system.line.electron_softening);
    R.v_h = H.potential(nt_tot);
  }
  Eigen::VectorXd vg = R.v_ext;
  if (opt.reference_potential == ReferencePotential::FermiAmaldi) vg += ((Ntot - 1.0) / Ntot) * R.v_h;
  if (opt.reference_potential == ReferencePotential::ExternalAndHartree) vg += R.v_h;
  if (radial) vg(0) = vg(1);  // r = 0 carries no weight; keep the vector finite and smooth-ish
  R.v_reference.assign(ns, vg);

  const Eigen::MatrixXd K = stiffness(m);
  std::vector<Eigen::VectorXd> delta(ns, Eigen::VectorXd::Zero(N));
  auto potentials = [&](const std::vector<Eigen::VectorXd>& d) {
    std::vector<Eigen::VectorXd> v(ns);
    for (int s = 0; s < ns; ++s) v[s] = vg + d[s];
    return v;
  };
  const bool wy = opt.method == InversionOptions::Method::WuYang;
  // Objective to minimize: Wu–Yang: −W(v) + penalty; direct: ½‖n − n_t‖² + penalty.
  auto objective = [&](const Evaluation& ev, const std::vector<Eigen::VectorXd>& d, double alpha) {
    double J = 0.0;
    if (wy) {
      J = -ev.band;
      for (int s = 0; s < ns; ++s) J += W.dot((vg + d[s]).cwiseProduct(nt[s]));
    } else {
      for (int s = 0; s < ns; ++s) J += 0.5 * W.dot((ev.density[s] - nt[s]).cwiseAbs2());
    }
    for (int s = 0; s < ns; ++s) J += 0.5 * alpha * d[s].dot(K * d[s]);
    return J;
  };

  Evaluation ev = E.evaluate(potentials(delta));
  const bool automatic = opt.regularization == 0.0;
  double alpha = automatic ? opt.regularization_start : opt.regularization;
  int iteration = 0;
  Errors err = density_errors(m, ev.density, nt);
  std::vector<std::string> history_lines;
  auto note = [&](const InversionStep& st) {
    char buf[200];
    std::snprintf(buf, sizeof buf, "  iter %3d  alpha %.1e  objective %.12e  int|n-n_t| %.3e  max|n-n_t| %.3e  step %.3f%s",
                  st.iteration, st.regularization, st.objective, st.density_l1, st.density_max, st.step,
                  wy ? "" : ("  cg " + std::to_string(st.krylov_iterations)).c_str());
    history_lines.emplace_back(buf);
    if (opt.progress) opt.progress(buf);
  };
  bool done = false;
  while (!done) {
    // Newton (Wu–Yang) or Gauss–Newton (direct) iterations at this α until they stall.
    double J = objective(ev, delta, alpha);
    int stalled = 0;
    for (int inner = 0; inner < 100; ++inner) {
      if (iteration >= opt.max_iterations) break;
      ++iteration;
      std::vector<Eigen::VectorXd> step(ns);
      std::vector<Eigen::VectorXd> grad(ns);
      int krylov = 0;
      double decrement = 0.0;
      for (int s = 0; s < ns; ++s) {
        const Eigen::MatrixXd A = E.hessian(ev, s);  // interior block, negative semi-definite
        const Eigen::VectorXd r = (ev.density[s] - nt[s]).segment(1, nu);
        Eigen::VectorXd g = alpha * (K * delta[s]);
        Eigen::MatrixXd S = alpha * K;
        if (wy) {
          g.segment(1, nu) -= W.segment(1, nu).cwiseProduct(r);
          S.block(1, 1, nu, nu) -= A;
        } else {
          g.segment(1, nu) += A * r;
        }
        // The constant never changes the density or the penalty: fix it with a rank-one term.
        const double gamma = S.diagonal().cwiseAbs().mean() / N;
        Eigen::VectorXd d;
        if (wy) {
          S.array() += gamma;
          d = spd_solve(S, -g);
        } else {
          // Gauss–Newton system (A W⁻¹ A + αK + γ 11ᵀ) d = −g by Jacobi-preconditioned CG.
          const Eigen::VectorXd Wi = W.segment(1, nu).cwiseInverse();
          auto apply = [&](const Eigen::VectorXd& x) {
            Eigen::VectorXd y = alpha * (K * x);
            y.segment(1, nu) += A * Wi.cwiseProduct(A * x.segment(1, nu));
            y.array() += gamma * x.sum();
            return y;
          };
          Eigen::VectorXd diag = alpha * K.diagonal();
          diag.segment(1, nu) += (A.cwiseAbs2() * Wi);
          diag.array() += gamma;
          diag = diag.cwiseMax(1e-300).cwiseInverse();
          d = Eigen::VectorXd::Zero(N);
          Eigen::VectorXd res = -g, z = diag.cwiseProduct(res), p = z;
          double rz = res.dot(z);
          const double bnorm = g.norm();
          const double forcing = std::min(1e-2, std::sqrt(g.norm() / std::max(1e-300, std::abs(J) + 1.0)));
          for (int it = 0; it < opt.max_krylov_iterations; ++it) {
            const Eigen::VectorXd Ap = apply(p);
            const double pAp = p.dot(Ap);
            if (!(pAp > 0)) break;
            const double a = rz / pAp;
            d += a * p;
            res -= a * Ap;
            ++krylov;
            if (res.norm() <= forcing * bnorm) break;
            z = diag.cwiseProduct(res);
            const double rz2 = res.dot(z);
            p = z + (rz2 / rz) * p;
            rz = rz2;
          }
        }
        decrement += -g.dot(d);
        step[s] = d;
        grad[s] = g;
      }
      // Converged at this α when the optimality residual is far below the density accuracy
      // asked for (Wu–Yang: the gradient is W (n − n_t) − αKΔ, in electrons), or the predicted
      // decrease is at the rounding level of the objective. The decrease is quadratic in the
      // gradient: for a diffuse density a density error of 1e-8 predicts a decrease at rounding
      // level while the step still moves the density by the whole error. So every new α gets
      // at least one Newton step (taken as a local step below) before the decrement may stop it.
      const double rounding = 1e-15 * (1.0 + std::abs(J));
      double gnorm = 0.0;
      for (int s = 0; s < ns; ++s) gnorm += grad[s].lpNorm<1>();
      if ((inner > 0 && decrement < rounding) || (wy && gnorm < 1e-3 * opt.density_tolerance)) {
        --iteration;
        break;
      }
      // Far from the optimum: backtracking (Armijo) line search on the convex objective. Close
      // to it the objective's changes approach its rounding, so full Newton steps are taken as
      // long as they keep reducing the density error or the gradient.
      const bool local = decrement < 1e-9 * (1.0 + std::abs(J));
      double t = 1.0;
      std::vector<Eigen::VectorXd> trial(ns);
      Evaluation evt;
      double Jt = 0.0;
      bool accepted = false;
      for (int ls = 0; ls < 30; ++ls) {
        for (int s = 0; s < ns; ++s) trial[s] = delta[s] + t * step[s];
        evt = E.evaluate(potentials(trial));
        Jt = objective(evt, trial, alpha);
        if (std::isfinite(Jt) && (local || Jt <= J - 1e-4 * t * decrement)) {
          accepted = true;
          break;
        }
        t *= 0.5;
      }
      const Errors before = err;
      if (accepted) {
        delta = trial;
        ev = std::move(evt);
        J = Jt;
      }
      err = density_errors(m, ev.density, nt);
      InversionStep st{iteration, alpha, J, err.l1, err.max, accepted ? t : 0.0, krylov};
      R.history.push_back(st);
      note(st);
      if (!accepted) break;
      // Stalled: a local step that no longer changes the density error.
      if (local && std::abs(err.l1 - before.l1) <= 1e-3 * err.l1) {
        if (++stalled >= 2) break;
      } else {
        stalled = 0;
      }
    }
    if (!automatic || err.l1 <= opt.density_tolerance || iteration >= opt.max_iterations) {
      done = true;
    } else if (alpha <= opt.regularization_min * (1.0 + 1e-12)) {
      done = true;
    } else {
      // The density error of the regularized maximum grows linearly with α: aim at half the
      // tolerance, but never by more than three decades, nor less than one factor, at once.
      const double predicted = 0.5 * opt.density_tolerance / std::max(err.l1, 1e-300);
      alpha *= std::clamp(predicted, 1e-3, 1.0 / opt.regularization_factor);
      alpha = std::max(alpha, opt.regularization_min);
    }
  }
  R.iterations = iteration;
  R.regularization = alpha;
  R.density_l1 = err.l1;
  R.density_max = err.max;
  if (!(err.l1 <= opt.density_tolerance)) {
    std::ostringstream msg;
    msg << "the inversion reached a density error of " << err.l1 << " electrons (int |n - n_t|), not the requested "
        << opt.density_tolerance << ", after " << iteration << " iterations (regularization " << alpha << ")";
    if (!automatic) msg << "; use regularization = \"auto\" or a smaller value";
    else if (iteration >= opt.max_iterations) msg << "; raise max_iterations";
    else msg << "; the target may not be reproducible on this grid with these occupations: raise density_tolerance, "
                "refine the grid, or check the target";
    throw NumericalError(msg.str(), [&] {
      std::vector<std::string> lines{"inversion history (density errors in electrons, objective in hartree):"};
      lines.insert(lines.end(), history_lines.begin(), history_lines.end());
      return lines;
    }());
  }

  // The constant of each spin.
  R.shift.assign(ns, 0.0);
  double homo = -std::numeric_limits<double>::infinity();
  int homo_spin = 0;
  std::vector<double> spin_homo(ns, -std::numeric_limits<double>::infinity());
  for (std::size_t ci = 0; ci < P.channels().size(); ++ci) {
    const Channel& ch = P.channels()[ci];
    for (std::size_t i = 0; i < ch.occupations.size(); ++i)
      if (ch.occupations[i] > 0) {
        spin_homo[ch.spin] = std::max(spin_homo[ch.spin], ev.states[ci].energies(i));
        if (ev.states[ci].energies(i) > homo) {
          homo = ev.states[ci].energies(i);
          homo_spin = ch.spin;
        }
      }
  }
  if (opt.constant == InversionOptions::Constant::Asymptotic) {
    for (int s = 0; s < ns; ++s) R.shift[s] = -edge_value(m, delta[s]);
  } else if (per_spin) {
    for (int s = 0; s < ns; ++s) {
      if (!std::isfinite(spin_homo[s]))
        throw InputError("an ionization energy was given for spin " + std::string(s == 0 ? "up" : "down") +
                         ", which holds no electrons; give one per occupied spin or a single ionization_energy");
      R.shift[s] = -opt.spin_ionization_energies[s] - spin_homo[s];
    }
  } else {
    R.shift[homo_spin] = -opt.ionization_energy - homo;
    for (int s = 0; s < ns; ++s)
      if (s != homo_spin) R.shift[s] = edge_value(m, delta[homo_spin]) + R.shift[homo_spin] - edge_value(m, delta[s]);
  }
  if (!radial) {
    for (int s = 0; s < ns; ++s) R.tail_mismatch = std::max(R.tail_mismatch, std::abs(delta[s](0) - delta[s](N - 1)));
  }
  R.homo = -std::numeric_limits<double>::infinity();
  for (int s = 0; s < ns; ++s)
    if (std::isfinite(spin_homo[s])) R.homo = std::max(R.homo, spin_homo[s] + R.shift[s]);
  R.v_s.resize(ns);
  for (int s = 0; s < ns; ++s) {
    R.v_s[s] = vg + delta[s];
    R.v_s[s].array() += R.shift[s];
    if (radial) R.v_s[s](0) = R.v_s[s](1);
  }
  if (opt.form == Form::Interacting) {
    for (int s = 0; s < ns; ++s) {
      R.v_hxc.push_back(R.v_s[s] - R.v_ext);
      R.v_xc.push_back(R.v_s[s] - R.v_ext - R.v_h);
      if (radial) {
        R.v_hxc.back()(0) = R.v_hxc.back()(1);
        R.v_xc.back()(0) = R.v_xc.back()(1);
      }
    }
  }
  R.density = ev.density;
  R.levels = labelled_levels(P, ev.states, R.shift);
  // The model functional on the target density, for comparison.
  if (!system.xc.empty() && opt.form == Form::Interacting) {
    XcSettings xs;
    xs.one_dimensional = !radial;
    xs.softening = system.line.electron_softening;
    xs.density_threshold = system.density_threshold;
    for (const FormulaSpec& f : system.formulas) xs.formulas.push_back(compile_formula(f));
    XcFunctional xc = make_functional(system.xc, xs, system.xc_parameters);
    if (!system.xc_weights.empty())
      for (std::size_t i = 0; i < xc.size() && i < system.xc_weights.size(); ++i)
        xc.set_weight(i, xc.weight(i) * system.xc_weights[i]);
    if (!xc.empty()) {
      XcOnMesh model;
      try {
        model = evaluate_xc(m, xc, nt, system.density_threshold);
      } catch (const NonFiniteModelError& e) {
        throw e.with_position(m, nt);
      }
      R.v_xc_model = model.potential;
      for (auto& v : R.v_xc_model)
        if (radial) v(0) = v(1);
      R.model_functional = xc_list_form(xc);
    }
  }
  R.trusted.assign(N, false);
  for (int k = 0; k < N; ++k)
    R.trusted[k] = nt_tot(k) > opt.trust_threshold && (covered.empty() || covered[k]) && !(radial && k == 0);
  R.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  // Nothing non-finite leaves this function.
  auto finite = [](const std::vector<Eigen::VectorXd>& vs) {
    return std::all_of(vs.begin(), vs.end(), [](const Eigen::VectorXd& v) { return v.allFinite(); });
  };
  if (!finite(R.v_s) || !finite(R.v_xc) || !finite(R.density) || !finite(R.v_xc_model) || !R.v_h.allFinite() ||
      !std::isfinite(R.homo))
    throw NumericalError("the reconstructed potential contains NaN or Inf");
  return R;
}

}  // namespace stillpoint
