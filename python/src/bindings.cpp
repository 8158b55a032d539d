// The compiled core of the Python package: a thin layer over the library, as the CLI is.
// Everything that reads, validates or computes lives in libstillpoint; this file converts
// types, releases the GIL around computations and maps the error tiers onto exceptions.
// The Python modules beside it (python/stillpoint/*.py) add keyword and dict inputs.
#include <pybind11/eigen.h>
#include <pybind11/functional.h>
#include <pybind11/pybind11.h>
#include <pybind11/stl.h>

#include <atomic>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "stillpoint/check/reference_check.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/exact/two_electron.hpp"
#include "stillpoint/fit/fit.hpp"
#include "stillpoint/fit/input.hpp"
#include "stillpoint/invert/inversion.hpp"
#include "stillpoint/ks/input.hpp"
#include "stillpoint/ks/problem.hpp"
#include "stillpoint/ks/xc_terms.hpp"
#include "stillpoint/response/converged_state.hpp"
#include "stillpoint/response/gradient.hpp"
#include "stillpoint/response/input.hpp"
#include "stillpoint/xc/callback_term.hpp"

namespace py = pybind11;
namespace sp = stillpoint;
using Eigen::VectorXd;

namespace {

// Rows of an (spins x nodes) array from per-spin vectors.
Eigen::MatrixXd stack(const std::vector<VectorXd>& per_spin) {
  if (per_spin.empty()) return Eigen::MatrixXd(0, 0);
  Eigen::MatrixXd m(per_spin.size(), per_spin[0].size());
  for (std::size_t s = 0; s < per_spin.size(); ++s) m.row(s) = per_spin[s].transpose();
  return m;
}

std::vector<VectorXd> unstack(const Eigen::MatrixXd& m) {
  std::vector<VectorXd> v;
  for (int s = 0; s < m.rows(); ++s) v.push_back(m.row(s).transpose());
  return v;
}

const char* kind_name(sp::ParameterRef::Kind k) {
  using K = sp::ParameterRef::Kind;
  switch (k) {
    case K::XcWeight: return "xc_weight";
    case K::Gaussian: return "gaussian";
    case K::Harmonic: return "harmonic";
    case K::Nucleus: return "nucleus";
    case K::GridPotential: return "grid_potential";
    case K::XcParameter: return "xc_parameter";
  }
  return "unknown";
}

py::dict energy_dict(const sp::EnergyParts& e) {
  py::dict d;
  d["total"] = e.total;
  d["kinetic"] = e.kinetic;
  d["external"] = e.external;
  d["hartree"] = e.hartree;
  d["xc"] = e.xc;
  d["nuclear_repulsion"] = e.nuclear_repulsion;
  d["band"] = e.band;
  return d;
}

py::list level_list(const std::vector<sp::Level>& levels) {
  py::list out;
  for (const sp::Level& lv : levels) {
    py::dict d;
    d["label"] = lv.label;
    d["spin"] = lv.spin;
    d["l"] = lv.l;
    d["occupation"] = lv.occupation;
    d["energy"] = lv.energy;
    out.append(d);
  }
  return out;
}

py::dict count_dict(const sp::ConvergedState::SolveCount& c) {
  py::dict d;
  d["linear_solves"] = c.linear_solves;
  d["krylov_iterations"] = c.krylov_iterations;
  d["max_linear_residual"] = c.max_linear_residual;
  return d;
}

// A solved system with its response, shared so that Python objects and warm starts can
// outlive the call that made them.
struct State {
  std::shared_ptr<const sp::ConvergedState> st;
  const sp::KsSolution& sol() const { return st->solution(); }
  const sp::KsProblem& prob() const { return st->problem(); }
};

State solve_system(const sp::SystemSpec& spec, const sp::ScfOptions& scf, const sp::ResponseOptions& response,
                   const State* start) {
  const sp::KsSolution* warm = nullptr;
  if (start && start->st && start->prob().mesh().num_nodes() == sp::KsProblem(spec).mesh().num_nodes())
    warm = &start->sol();
  return State{std::make_shared<const sp::ConvergedState>(spec, scf, response, warm)};
}

py::dict grad_result_dict(const sp::GradInput& in, const sp::GradientResult& r) {
  py::dict d;
  std::vector<std::string> names, terms;
  for (const auto& p : in.parameters) names.push_back(p.name);
  for (const auto& t : in.loss) terms.push_back(t.name);
  d["loss"] = r.loss;
  d["gradient"] = r.gradient;
  d["parameters"] = names;
  d["terms"] = terms;
  d["term_values"] = r.term_values;
  d["term_quantities"] = r.term_quantities;
  d["linear_solves"] = r.linear_solves;
  d["krylov_iterations"] = r.krylov_iterations;
  d["max_linear_residual"] = r.max_linear_residual;
  d["scf_seconds"] = r.scf_seconds;
  d["gradient_seconds"] = r.gradient_seconds;
  return d;
}

// Forwards fit progress to a Python callable; a true return value asks the fit to stop at
// the end of the iteration (as an interrupt would), so the result is a complete fit record.
class PyFitObserver : public sp::FitObserver {
 public:
  PyFitObserver(py::object callback, std::atomic<int>* stop) : callback_(std::move(callback)), stop_(stop) {}
  void iteration(const sp::FitIteration& it) override {
    py::gil_scoped_acquire gil;
    if (callback_.is_none()) return;
    py::dict d;
    d["iteration"] = it.iteration;
    d["loss"] = it.loss;
    d["gradient_norm"] = it.gradient_norm;
    d["validation_loss"] = std::isfinite(it.validation_loss) ? py::cast(it.validation_loss) : py::none();
    d["seconds"] = it.seconds;
    d["step_successful"] = it.step_successful;
    try {
      if (py::bool_(callback_(d))) stop_->store(1);
    } catch (py::error_already_set& e) {
      // An exception in the callback stops the fit; it is raised again after the run.
      error_ = std::make_unique<py::error_already_set>(std::move(e));
      stop_->store(1);
    }
  }
  void message(const std::string& line) override { messages_.push_back(line); }
  std::unique_ptr<py::error_already_set> error_;
  std::vector<std::string> messages_;

 private:
  py::object callback_;
  std::atomic<int>* stop_;
};

// A Python object owned by the library, which may drop it on any thread with or without the
// GIL (a worker of a gradient, a State released while the library computes): the last owner
// takes the GIL to release it, and leaves it alone once the interpreter is gone.
template <class T>
std::shared_ptr<T> hold(T obj) {
  return std::shared_ptr<T>(new T(std::move(obj)), [](T* p) {
    if (!Py_IsInitialized()) return;  // a leak at exit, not a crash
    py::gil_scoped_acquire gil;
    delete p;
  });
}

// The exception a callable raised, kept whole (type, value, traceback) to be raised again
// where the library's call returns to Python.
struct RaisedInCallback {
  py::object type, value, trace;
};

class PythonRaised : public sp::XcCallbackError {
 public:
  PythonRaised(const std::string& what, std::shared_ptr<RaisedInCallback> raised)
      : sp::XcCallbackError(what), raised_(std::move(raised)) {}
  void restore() const {
    PyErr_Restore(raised_->type.inc_ref().ptr(), raised_->value.inc_ref().ptr(),
                  raised_->trace.is_none() ? nullptr : raised_->trace.inc_ref().ptr());
  }

 private:
  std::shared_ptr<RaisedInCallback> raised_;
};

[[noreturn]] void abandon(py::error_already_set& e, const std::string& label) {
  const std::string what = e.what();  // built now: it needs the GIL
  py::object value = e.value();
  // The user's own exception travels on; a note says which term's callable raised it.
  if (py::hasattr(value, "add_note")) {
    try {
      value.attr("add_note")("raised in the callable of xc term '" + label + "', called by stillpoint");
    } catch (py::error_already_set&) {
    }
  }
  throw PythonRaised("xc term '" + label + "': the callable raised " + what,
                     hold(RaisedInCallback{e.type(), value, e.trace()}));
}

[[noreturn]] void refuse(PyObject* kind, const std::string& message) {
  py::object exc = py::reinterpret_borrow<py::object>(kind)(message);
  throw PythonRaised(message, hold(RaisedInCallback{py::reinterpret_borrow<py::object>(kind), exc, py::none()}));
}

std::string shape_text(const std::vector<py::ssize_t>& shape) {
  std::string s = "(";
  for (std::size_t i = 0; i < shape.size(); ++i) s.append(i ? ", " : "").append(std::to_string(shape[i]));
  return s.append(shape.size() == 1 ? ",)" : ")");
}

// One returned array into the library's layout: it must hold exactly shape's values with the
// leading dimension first (a component axis of length one may be left out).
void take(const py::dict& d, const char* key, const std::vector<py::ssize_t>& shape, const std::string& label,
          const char* meaning, std::vector<double>& to) {
  if (!d.contains(key))
    refuse(PyExc_ValueError, "xc term '" + label + "': the callable's result has no '" + key + "' (" + meaning +
                                 ", shape " + shape_text(shape) + ")");
  py::object v = d[key];
  auto a = py::array_t<double, py::array::c_style | py::array::forcecast>::ensure(v);
  if (!a) {
    PyErr_Clear();
    refuse(PyExc_TypeError, "xc term '" + label + "': '" + key + "' is a " +
                                std::string(py::str(py::type::handle_of(v).attr("__name__"))) +
                                ", not an array of numbers (" + meaning + ", shape " + shape_text(shape) + ")");
  }
  py::ssize_t want = 1;
  for (auto n : shape) want *= n;
  std::vector<py::ssize_t> got(a.shape(), a.shape() + a.ndim());
  std::vector<py::ssize_t> squeezed = shape;
  while (squeezed.size() > 1 && squeezed.back() == 1) squeezed.pop_back();
  if (got != shape && got != squeezed)
    refuse(PyExc_ValueError, "xc term '" + label + "': '" + key + "' has shape " + shape_text(got) + ", expected " +
                                 shape_text(shape) + " (" + meaning + ")");
  to.assign(a.data(), a.data() + want);
}

std::function<void(const sp::XcCallbackRequest&, sp::XcCallbackResult&)> python_evaluator(py::function fn,
                                                                                         const std::string& label,
                                                                                         bool gradient) {
  auto f = hold(py::object(std::move(fn)));
  return [f, label, gradient](const sp::XcCallbackRequest& q, sp::XcCallbackResult& r) {
    py::gil_scoped_acquire gil;
    const sp::XcPointData& p = *q.points;
    const py::ssize_t np = static_cast<py::ssize_t>(p.np), ns = p.nspin, nsig = ns == 1 ? 1 : 3;
    const py::ssize_t P = static_cast<py::ssize_t>(q.parameters->size());
    py::object result;
    try {
      py::array_t<double> rho({np, ns});
      std::copy(p.rho.begin(), p.rho.end(), rho.mutable_data());
      py::object sigma = py::none();
      if (gradient) {
        py::array_t<double> s({np, nsig});
        std::copy(p.sigma.begin(), p.sigma.end(), s.mutable_data());
        sigma = s;
      }
      py::array_t<double> theta(P);
      std::copy(q.parameters->begin(), q.parameters->end(), theta.mutable_data());
      result = (*f)(rho, sigma, theta, q.order, q.parameter_derivatives, q.one_dimensional);
    } catch (py::error_already_set& e) {
      abandon(e, label);
    }
    if (!py::isinstance<py::dict>(result))
      refuse(PyExc_TypeError, "xc term '" + label + "': the callable returned a " +
                                  std::string(py::str(py::type::handle_of(result).attr("__name__"))) +
                                  "; return a dict of arrays ('e', 'vrho', ...; docs/python.md)");
    const py::dict d = result;
    const py::ssize_t n2 = ns == 1 ? 1 : 3, n6 = ns == 1 ? 1 : 6;
    take(d, "e", {np}, label, "energy per volume at every point", r.values.e);
    take(d, "vrho", {np, ns}, label, "de/dn per point and spin", r.values.vrho);
    if (gradient) take(d, "vsigma", {np, nsig}, label, "de/dsigma per point and invariant", r.values.vsigma);
    if (q.order >= 2) {
      take(d, "v2rho2", {np, n2}, label, "second derivatives in the densities, needed by the response", r.values.v2rho2);
      if (gradient) {
        take(d, "v2rhosigma", {np, n6}, label, "mixed second derivatives, needed by the response", r.values.v2rhosigma);
        take(d, "v2sigma2", {np, n6}, label, "second derivatives in sigma, needed by the response", r.values.v2sigma2);
      }
    }
    if (q.parameter_derivatives) {
      take(d, "de", {P, np}, label, "de/dtheta per parameter and point", r.de);
      take(d, "dvrho", {P, np, ns}, label, "dvrho/dtheta per parameter, point and spin", r.dvrho);
      if (gradient) take(d, "dvsigma", {P, np, nsig}, label, "dvsigma/dtheta per parameter, point and invariant", r.dvsigma);
    }
  };
}

}  // namespace

PYBIND11_MODULE(_core, m) {
  m.doc() = "Compiled core of stillpoint (use the `stillpoint` package, not this module).";

  // Error tiers (see include/stillpoint/common/errors.hpp): the CLI's exit codes 2, 3 and 5.
  static py::exception<sp::InputError> input_error(m, "InputError", PyExc_ValueError);
  static py::exception<sp::NumericalError> numerical_error(m, "NumericalError", PyExc_RuntimeError);
  static py::exception<sp::OutputError> output_error(m, "OutputError", PyExc_OSError);
  py::register_exception_translator([](std::exception_ptr p) {
    try {
      if (p) std::rethrow_exception(p);
    } catch (const sp::InputError& e) {
      PyErr_SetString(input_error.ptr(), e.what());
    } catch (const sp::NumericalError& e) {
      std::string msg = e.what();
      for (const std::string& line : e.details()) msg.append("\n").append(line);
      PyErr_SetString(numerical_error.ptr(), msg.c_str());
    } catch (const sp::OutputError& e) {
      PyErr_SetString(output_error.ptr(), e.what());
    } catch (const PythonRaised& e) {
      e.restore();  // the callable's own exception, with its traceback
    } catch (const sp::XcCallbackError& e) {
      PyErr_SetString(numerical_error.ptr(), e.what());
    }
  });

  // Callback xc terms (python/stillpoint/xc.py builds the callables). Registered callables
  // are released before the interpreter goes away.
  m.def(
      "register_xc_callback",
      [](const std::string& name, py::function evaluate, bool gradient, bool line, bool atom,
         const std::vector<std::string>& parameter_names, const std::vector<double>& parameters) {
        auto cb = std::make_shared<sp::XcCallback>();
        cb->name = name;
        cb->needs_gradient = gradient;
        cb->line = line;
        cb->atom = atom;
        cb->parameter_names = parameter_names;
        cb->default_parameters = parameters;
        cb->evaluate = python_evaluator(std::move(evaluate), "callback:" + name, gradient);
        sp::register_xc_callback(std::move(cb));
      },
      py::arg("name"), py::arg("evaluate"), py::arg("gradient"), py::arg("line"), py::arg("atom"),
      py::arg("parameter_names"), py::arg("parameters"));
  m.def("remove_xc_callback", &sp::remove_xc_callback, py::arg("name"));
  m.def("xc_callback_names", &sp::xc_callback_names);
  py::module_::import("atexit").attr("register")(py::cpp_function([] { sp::clear_xc_callbacks(); }));

  py::class_<sp::ScfOptions>(m, "ScfOptions", "SCF settings (docs/input.md, [scf]); hartree.")
      .def(py::init<>())
      .def_readwrite("max_iterations", &sp::ScfOptions::max_iterations)
      .def_readwrite("potential_tolerance", &sp::ScfOptions::potential_tolerance)
      .def_readwrite("energy_tolerance", &sp::ScfOptions::energy_tolerance)
      .def_readwrite("eigenvalue_tolerance", &sp::ScfOptions::eigenvalue_tolerance)
      .def_readwrite("mixing", &sp::ScfOptions::mixing)
      .def_readwrite("history", &sp::ScfOptions::history);

  py::class_<sp::ResponseOptions>(m, "ResponseOptions", "Linear-response settings of the implicit derivatives.")
      .def(py::init<>())
      .def_readwrite("krylov_tolerance", &sp::ResponseOptions::krylov_tolerance)
      .def_readwrite("krylov_max_iterations", &sp::ResponseOptions::krylov_max_iterations)
      .def_readwrite("sternheimer_tolerance", &sp::ResponseOptions::sternheimer_tolerance)
      .def_readwrite("relaxed_inner_tolerance", &sp::ResponseOptions::relaxed_inner_tolerance)
      .def_readwrite("degeneracy_tolerance", &sp::ResponseOptions::degeneracy_tolerance);

  py::class_<sp::SystemSpec>(m, "System", "One system as an input file describes it (read with `load`).")
      .def_readonly("name", &sp::SystemSpec::name)
      .def_property_readonly("geometry",
                             [](const sp::SystemSpec& s) { return s.geometry == sp::Geometry::Line ? "line" : "atom"; })
      .def_property_readonly("electrons", &sp::SystemSpec::electron_count)
      .def_readonly("xc", &sp::SystemSpec::xc)
      .def_readonly("spin_polarized", &sp::SystemSpec::spin_polarized)
      .def("__repr__", [](const sp::SystemSpec& s) { return "<stillpoint.System '" + s.name + "'>"; });

  py::class_<sp::SolveInput>(m, "SolveInput", "The systems and [scf] settings of a `solve` input.")
      .def_readonly("file", &sp::SolveInput::file)
      .def_readonly("systems", &sp::SolveInput::systems)
      .def_readonly("scf", &sp::SolveInput::scf)
      .def("__repr__", [](const sp::SolveInput& in) {
        return "<stillpoint.SolveInput '" + in.file + "' with " + std::to_string(in.systems.size()) + " systems>";
      });
  m.def("read_solve", &sp::read_solve_input, py::arg("path"));
  m.def("parse_solve", &sp::parse_solve_input, py::arg("text"), py::arg("name"));

  py::class_<sp::ParameterRef>(m, "Parameter", "One named scalar parameter (docs/grad.md, [[parameter]]).")
      .def_readonly("name", &sp::ParameterRef::name)
      .def_property_readonly("kind", [](const sp::ParameterRef& p) { return kind_name(p.kind); })
      .def_readonly("system", &sp::ParameterRef::system)
      .def_readonly("index", &sp::ParameterRef::index)
      .def_readonly("field", &sp::ParameterRef::field)
      .def_readonly("lower", &sp::ParameterRef::lower)
      .def_readonly("upper", &sp::ParameterRef::upper)
      .def("__repr__", [](const sp::ParameterRef& p) { return "<stillpoint.Parameter '" + p.name + "'>"; });

  py::class_<sp::GradInput>(m, "GradInput", "Systems, parameters and loss terms of a `grad` input.")
      .def_property_readonly("base", [](const sp::GradInput& g) { return g.base; })
      .def_readonly("parameters", &sp::GradInput::parameters)
      .def_property_readonly("loss_terms",
                             [](const sp::GradInput& g) {
                               std::vector<std::string> n;
                               for (const auto& t : g.loss) n.push_back(t.name);
                               return n;
                             })
      .def_property_readonly("initial_values",
                             [](const sp::GradInput& g) { return sp::parameter_values(g.base.systems, g.parameters); })
      .def_readonly("warnings", &sp::GradInput::warnings);
  m.def("read_grad", &sp::read_grad_input, py::arg("path"));
  m.def("parse_grad", &sp::parse_grad_input, py::arg("text"), py::arg("name"));
  m.def("apply_parameters",
        [](const std::vector<sp::SystemSpec>& systems, const std::vector<sp::ParameterRef>& params, const VectorXd& theta) {
          if (theta.size() != static_cast<Eigen::Index>(params.size()))
            throw sp::InputError("got " + std::to_string(theta.size()) + " values for " + std::to_string(params.size()) +
                                 " parameters");
          return sp::apply_parameters(systems, params, theta);
        },
        py::arg("systems"), py::arg("parameters"), py::arg("theta"));

  m.def(
      "grad",
      [](const sp::GradInput& in, const std::optional<VectorXd>& theta, int threads, bool verify) {
        sp::GradientOptions opt = in.options;
        opt.threads = std::max(1, threads);
        sp::GradientProblem problem(in.base.systems, in.parameters, in.loss, opt);
        const VectorXd th = theta ? *theta : problem.initial_values();
        if (th.size() != static_cast<Eigen::Index>(in.parameters.size()))
          throw sp::InputError("got " + std::to_string(th.size()) + " values for " +
                               std::to_string(in.parameters.size()) + " parameters");
        sp::GradientResult r;
        VectorXd fd;
        {
          py::gil_scoped_release release;
          r = problem.evaluate(th);
          if (verify) {
            sp::ScfOptions tight = opt.scf;
            tight.potential_tolerance = std::min(tight.potential_tolerance, 1e-12);
            tight.energy_tolerance = std::min(tight.energy_tolerance, 1e-13);
            tight.eigenvalue_tolerance = std::min(tight.eigenvalue_tolerance, 1e-12);
            fd = problem.finite_difference_gradient(th, sp::default_fd_steps(in.parameters, th, in.verify_step), tight);
          }
        }
        py::dict d = grad_result_dict(in, r);
        d["theta"] = th;
        if (verify) d["finite_difference_gradient"] = fd;
        return d;
      },
      py::arg("input"), py::arg("theta") = py::none(), py::arg("threads") = 1, py::arg("verify") = false);

  py::class_<State>(m, "State",
                    "A converged Kohn–Sham state: grid, densities, potentials, levels, energies (hartree, bohr)\n"
                    "and products with the Jacobian of its outputs through the SCF fixed point.")
      .def_property_readonly("name", [](const State& s) { return s.prob().spec().name; })
      .def_property_readonly("system", [](const State& s) { return s.prob().spec(); })
      .def_property_readonly("geometry",
                             [](const State& s) { return s.prob().spec().geometry == sp::Geometry::Line ? "line" : "atom"; })
      .def_property_readonly("nodes", [](const State& s) { return s.prob().mesh().x(); },
                             "mesh nodes: x (line) or r (atom), bohr")
      .def_property_readonly("weights", [](const State& s) { return s.prob().mesh().density_weight(); },
                             "quadrature weights W of a density: sum(W * n) is the electron count")
      .def_property_readonly("density", [](const State& s) { return stack(s.sol().density); },
                             "density per spin (rows), electrons/bohr (line) or /bohr^3 (atom)")
      .def_property_readonly("total_density", [](const State& s) { return s.sol().total_density(); })
      .def_property_readonly("v_ext", [](const State& s) { return s.sol().v_ext; }, "hartree")
      .def_property_readonly("v_h", [](const State& s) { return s.sol().v_h; }, "hartree")
      .def_property_readonly("v_xc", [](const State& s) { return stack(s.sol().v_xc); }, "per spin, hartree")
      .def_property_readonly("v_s", [](const State& s) { return stack(s.sol().v_s); }, "per spin, hartree")
      .def_property_readonly("levels", [](const State& s) { return level_list(s.sol().levels); },
                             "every computed level: label, spin, l, occupation (electrons), energy (hartree)")
      .def_property_readonly("energy", [](const State& s) { return energy_dict(s.sol().energy); },
                             "energy parts, hartree")
      .def_property_readonly("xc_terms",
                             [](const State& s) {
                               py::list out;
                               for (const auto& t : sp::xc_term_energies(s.prob(), s.sol().density)) {
                                 py::dict d;
                                 d["name"] = t.name;
                                 d["kind"] = t.kind;
                                 d["weight"] = t.weight;
                                 d["energy"] = t.energy;
                                 out.append(d);
                               }
                               return out;
                             },
                             "energy of every term of the xc sum, hartree")
      .def_property_readonly("orbitals",
                             [](const State& s) {
                               py::list out;
                               const auto& ch = s.prob().channels();
                               for (std::size_t c = 0; c < ch.size(); ++c) {
                                 py::dict d;
                                 d["l"] = ch[c].l;
                                 d["spin"] = ch[c].spin;
                                 d["labels"] = ch[c].labels;
                                 d["occupations"] = ch[c].occupations;
                                 d["energies"] = s.sol().states[c].energies;
                                 d["values"] = s.sol().states[c].orbitals;
                                 out.append(d);
                               }
                               return out;
                             },
                             "per channel: nodal orbital values (column per state; atoms: u = r R), "
                             "normalized so that sum(w u^2) = 1 with the mesh's plain quadrature weights")
      .def_property_readonly("history",
                             [](const State& s) {
                               py::list out;
                               for (const auto& h : s.sol().history) {
                                 py::dict d;
                                 d["iteration"] = h.iteration;
                                 d["energy"] = h.energy;
                                 d["residual"] = h.residual;
                                 d["eigenvalue_change"] = h.eigenvalue_change;
                                 out.append(d);
                               }
                               return out;
                             },
                             "SCF history: energy and residual (hartree) per iteration")
      .def_property_readonly("iterations", [](const State& s) { return s.sol().iterations; })
      .def(
          "eigenvalue", [](const State& s, const std::string& label, int spin) { return s.st->eigenvalue(label, spin); },
          py::arg("label"), py::arg("spin") = 0, "energy of a level (\"2p\", \"3\", \"homo\", \"lumo\"), hartree")
      .def(
          "vector_jacobian",
          [](const State& s, const std::vector<sp::ParameterRef>& params, double energy, const std::optional<VectorXd>& density,
             const std::vector<double>& levels) {
            sp::ConvergedState::Cotangent w;
            w.energy = energy;
            if (density) w.density = *density;
            w.levels = levels;
            sp::ConvergedState::SolveCount count;
            VectorXd g;
            {
              py::gil_scoped_release release;
              g = s.st->vector_jacobian(params, w, &count);
            }
            return py::make_tuple(g, count_dict(count));
          },
          py::arg("parameters"), py::arg("energy") = 0.0, py::arg("density") = py::none(),
          py::arg("levels") = std::vector<double>{},
          "dL/dtheta for L = energy*E + sum_k density[k] n[k] + sum_i levels[i] eps_i (one adjoint solve);\n"
          "returns (gradient, solve statistics)")
      .def(
          "jacobian_vector",
          [](const State& s, const std::vector<sp::ParameterRef>& params, const VectorXd& direction) {
            sp::ConvergedState::SolveCount count;
            sp::ConvergedState::OutputTangent t;
            {
              py::gil_scoped_release release;
              t = s.st->jacobian_vector(params, direction, &count);
            }
            py::dict d;
            d["energy"] = t.energy;
            d["density"] = t.density;
            d["levels"] = t.levels;
            d["statistics"] = count_dict(count);
            return d;
          },
          py::arg("parameters"), py::arg("direction"),
          "derivatives of E, n (total, every node) and the levels along a parameter direction (one tangent solve)")
      .def(
          "density_adjoint",
          [](const State& s, const Eigen::MatrixXd& dL_dn, const std::vector<double>& dL_deps) {
            std::vector<VectorXd> z;
            {
              py::gil_scoped_release release;
              z = s.st->adjoint(unstack(dL_dn), dL_deps);
            }
            return stack(z);
          },
          py::arg("dL_dn"), py::arg("dL_deps") = std::vector<double>{},
          "zeta of the adjoint equation (per spin): dL/dv_ext at node k is W_k * sum_s zeta[s, k]");

  m.def(
      "solve_system",
      [](const sp::SystemSpec& spec, const sp::ScfOptions& scf, const sp::ResponseOptions& response,
         const State* start) {
        py::gil_scoped_release release;
        return solve_system(spec, scf, response, start);
      },
      py::arg("system"), py::arg("scf") = sp::ScfOptions{}, py::arg("response") = sp::ResponseOptions{},
      py::arg("start") = nullptr);

  m.def(
      "check",
      [](const std::vector<std::string>& tables, double tolerance, const std::string& grid, const sp::ScfOptions& scf) {
        std::vector<sp::ReferenceRow> rows;
        for (const auto& t : tables) {
          auto r = sp::read_reference_table(t);
          rows.insert(rows.end(), r.begin(), r.end());
        }
        sp::CheckOptions opt;
        opt.tolerance = tolerance;
        opt.grid = grid;
        opt.scf = scf;
        sp::CheckReport rep;
        {
          py::gil_scoped_release release;
          rep = sp::run_reference_check(rows, opt);
        }
        py::list out;
        for (const auto& r : rep.results) {
          py::dict d;
          d["Z"] = r.row.Z;
          d["symbol"] = r.row.symbol;
          d["charge"] = r.row.charge;
          d["configuration"] = r.row.configuration;
          d["approximation"] = r.row.approximation;
          d["quantity"] = r.row.quantity;
          d["reference"] = r.row.value;
          d["computed"] = r.computed;
          d["deviation"] = r.deviation;
          d["passed"] = r.passed;
          d["file"] = r.row.file;
          d["line"] = r.row.line;
          out.append(d);
        }
        py::dict d;
        d["rows"] = out;
        d["checked"] = rep.n_checked;
        d["failed"] = rep.n_failed;
        d["max_abs_deviation"] = rep.max_abs_deviation;
        d["seconds"] = rep.seconds;
        return d;
      },
      py::arg("tables"), py::arg("tolerance") = 1e-6, py::arg("grid") = "default", py::arg("scf") = sp::ScfOptions{});

  py::class_<sp::ExactInput>(m, "ExactInput", "Systems and [exact] settings of an `exact` input.")
      .def_readonly("file", &sp::ExactInput::file)
      .def_readonly("systems", &sp::ExactInput::systems)
      .def_readonly("warnings", &sp::ExactInput::warnings);
  m.def("read_exact", &sp::read_exact_input, py::arg("path"));
  m.def("parse_exact", &sp::parse_exact_input, py::arg("text"), py::arg("name"));
  m.def(
      "exact",
      [](const sp::ExactInput& in) {
        std::vector<sp::ExactResult> results;
        {
          py::gil_scoped_release release;
          for (const auto& s : in.systems) results.push_back(sp::solve_exact(s, in.options));
        }
        py::list out;
        for (const auto& r : results) {
          py::dict d;
          d["name"] = r.spec.name;
          d["nodes"] = r.mesh.x();
          d["weights"] = r.mesh.density_weight();
          d["electrons"] = r.electrons;
          d["density"] = r.density;
          d["v_ext"] = r.v_ext;
          d["v_s"] = r.ks.v_s;
          d["v_h"] = r.v_h;
          d["v_hxc"] = r.v_hxc;
          d["v_xc"] = r.v_xc;
          py::dict e;
          e["total"] = r.energy.total;
          e["electronic"] = r.energy.electronic;
          e["kinetic"] = r.energy.kinetic;
          e["external"] = r.energy.external;
          e["electron_electron"] = r.energy.electron_electron;
          e["nuclear_repulsion"] = r.energy.nuclear_repulsion;
          e["kinetic_s"] = r.energy.kinetic_s;
          e["hartree"] = r.energy.hartree;
          e["exchange"] = r.energy.exchange;
          e["correlation"] = r.energy.correlation;
          d["energy"] = e;
          d["homo"] = r.energy.total - r.energy_minus_one;
          py::list levels;
          for (const auto& lv : r.levels) {
            py::dict l;
            l["spin"] = lv.spin;
            l["index"] = lv.index;
            l["energy"] = lv.energy;
            l["residual"] = lv.residual;
            l["bound"] = lv.bound;
            levels.append(l);
          }
          d["levels"] = levels;
          d["grid_error_estimate"] = r.grid_error_estimate ? py::cast(*r.grid_error_estimate) : py::none();
          out.append(d);
        }
        return out;
      },
      py::arg("input"));

  py::class_<sp::InvertInput>(m, "InvertInput", "System, target and [invert] settings of an `invert` input.")
      .def_readonly("file", &sp::InvertInput::file)
      .def_readonly("system", &sp::InvertInput::system)
      .def_readonly("target_file", &sp::InvertInput::target_file);
  m.def("read_invert", &sp::read_invert_input, py::arg("path"));
  m.def("parse_invert", &sp::parse_invert_input, py::arg("text"), py::arg("name"));
  m.def(
      "invert",
      [](const sp::InvertInput& in, const std::optional<Eigen::MatrixXd>& target_rows) {
        const sp::KsProblem probe(in.system);
        const auto electrons = sp::electrons_per_spin(in.system);
        sp::TargetDensity t;
        if (target_rows) {
          // Rows: x (or r) in bohr, then the density per spin (or the total).
          if (target_rows->cols() < 2)
            throw sp::InputError("target: give an array with columns x (bohr) and the density");
          std::vector<double> x(target_rows->rows());
          std::vector<std::vector<double>> n(target_rows->cols() - 1, std::vector<double>(target_rows->rows()));
          for (int i = 0; i < target_rows->rows(); ++i) {
            x[i] = (*target_rows)(i, 0);
            for (int c = 1; c < target_rows->cols(); ++c) n[c - 1][i] = (*target_rows)(i, c);
          }
          t = sp::target_on_mesh(x, n, probe.mesh(), electrons, "array");
        } else {
          t = sp::read_target_density(in.target_file, probe.mesh(), electrons, in.target_location, in.target_column);
        }
        sp::InversionResult r;
        {
          py::gil_scoped_release release;
          r = sp::invert_density(in.system, t.density, in.options, t.covered);
        }
        py::dict d;
        d["nodes"] = probe.mesh().x();
        d["weights"] = probe.mesh().density_weight();
        d["v_s"] = stack(r.v_s);
        d["v_xc"] = stack(r.v_xc);
        d["v_hxc"] = stack(r.v_hxc);
        d["v_reference"] = stack(r.v_reference);
        d["v_ext"] = r.v_ext;
        d["v_h"] = r.v_h;
        d["density"] = stack(r.density);
        d["target"] = stack(r.target);
        d["trusted"] = r.trusted;
        d["density_l1"] = r.density_l1;
        d["density_max"] = r.density_max;
        d["regularization"] = r.regularization;
        d["iterations"] = r.iterations;
        d["homo"] = r.homo;
        d["levels"] = level_list(r.levels);
        d["warnings"] = t.warnings;
        return d;
      },
      py::arg("input"), py::arg("target") = py::none());

  py::class_<sp::FitWorkflow>(m, "FitWorkflow", "A `fit` workflow: systems, datasets, parameters, loss, [fit].")
      .def_readonly("file", &sp::FitWorkflow::file)
      .def_readonly("warnings", &sp::FitWorkflow::warnings);
  m.def("read_fit", &sp::read_fit_workflow, py::arg("path"));
  m.def("parse_fit", &sp::parse_fit_workflow, py::arg("text"), py::arg("name"));
  m.def(
      "fit",
      [](const sp::FitWorkflow& wf, py::object callback, const std::string& checkpoint, bool resume, int threads) {
        std::atomic<int> stop{0};
        PyFitObserver observer(callback, &stop);
        sp::FitRunOptions run;
        run.checkpoint = checkpoint;
        run.resume = resume;
        run.stop = &stop;
        run.observer = &observer;
        sp::FitResult r;
        {
          py::gil_scoped_release release;
          sp::FitSpec spec = wf.spec;
          if (threads > 0) spec.options.threads = threads;
          r = sp::run_fit(spec, run);
        }
        if (observer.error_) throw std::move(*observer.error_);
        py::dict d;
        std::vector<std::string> names;
        for (const auto& p : wf.spec.parameters) names.push_back(p.name);
        d["parameters"] = names;
        d["initial"] = r.initial;
        d["fitted"] = r.fitted;
        d["termination"] = sp::to_string(r.termination);
        d["message"] = r.message;
        d["loss"] = r.after.training_loss;
        d["initial_loss"] = r.before.training_loss;
        d["evaluations"] = r.evaluations;
        int iterations = 0;  // as fit.json counts: the history starts with iteration 0, the start
        for (const auto& it : r.history) iterations = std::max(iterations, it.iteration);
        d["iterations"] = iterations;
        py::list hist;
        for (const auto& it : r.history) {
          py::dict h;
          h["iteration"] = it.iteration;
          h["loss"] = it.loss;
          h["gradient_norm"] = it.gradient_norm;
          hist.append(h);
        }
        d["history"] = hist;
        if (r.uncertainty.computed) d["standard_error"] = r.uncertainty.standard_error;
        else d["standard_error"] = py::none();
        d["messages"] = observer.messages_;
        d["warnings"] = r.warnings;
        return d;
      },
      py::arg("workflow"), py::arg("callback") = py::none(), py::arg("checkpoint") = "", py::arg("resume") = false,
      py::arg("threads") = 0);
}
