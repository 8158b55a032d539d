#pragma once
// Exchange-correlation terms computed by code outside the library: a registered callback is
// handed every point of a mesh at once (vectorized) and returns the energy per volume and its
// derivatives in the libxc layout of functional.hpp, to second order, and on request the
// derivatives of e, vrho and vsigma with respect to its parameters. The library checks what
// comes back (sizes, finiteness) and treats the term like any other: it can be weighted,
// summed with libxc and model terms, and its parameters are "xc_parameter"s of grad and fit.
//
// A callback is named in xc lists as "callback:<name>". The registry is process-wide, as the
// model family registry is, because input readers resolve xc names from text.
#include <cstddef>
#include <functional>
#include <memory>
#include <stdexcept>
#include <string>
#include <vector>

#include "stillpoint/xc/functional.hpp"

namespace stillpoint {

struct XcCallbackRequest {
  const XcPointData* points = nullptr;
  const std::vector<double>* parameters = nullptr;
  /// 1: e, vrho (and vsigma); 2: also v2rho2 (and v2rhosigma, v2sigma2).
  int order = 1;
  /// Also de, dvrho (and dvsigma) with respect to every parameter.
  bool parameter_derivatives = false;
  /// The line geometry (reduced variables such as r_s and s^2 are defined per dimension).
  bool one_dimensional = false;
};

struct XcCallbackResult {
  /// Sized by the library before the call (XcDerivatives::reset), filled by the callback.
  XcDerivatives values;
  /// Parameter-major: entry [(p * np + i) * k + c] for parameter p, point i, component c
  /// (k = 1 for de, nspin for dvrho, nsigma for dvsigma). Sized before the call as well.
  std::vector<double> de, dvrho, dvsigma;
};

struct XcCallback {
  std::string name;
  bool needs_gradient = false;
  /// Geometries the term is written for.
  bool line = true, atom = true;
  std::vector<std::string> parameter_names;
  std::vector<double> default_parameters;
  /// Called from whichever thread computes (grad and fit solve systems in parallel), possibly
  /// from several at once; it must serialize itself if it needs to (the Python adapter takes
  /// the GIL).
  std::function<void(const XcCallbackRequest&, XcCallbackResult&)> evaluate;
};

/// Adds or replaces the callback `cb->name`. InputError for an empty name, characters other than
/// letters, digits and '_', or default parameters that do not match the names.
void register_xc_callback(std::shared_ptr<const XcCallback> cb);
/// Removes a callback; terms already made keep theirs. Returns whether it was registered.
bool remove_xc_callback(const std::string& name);
/// Drops every callback (so that foreign objects they hold are released while their owner lives).
void clear_xc_callbacks();
std::vector<std::string> xc_callback_names();

/// The term of a registered callback (InputError naming the registered ones if there is none),
/// with its default parameters when `params` is empty.
std::unique_ptr<XcTerm> make_callback_term(const std::string& name, const std::vector<double>& params,
                                           const XcSettings& settings);

/// A callback that failed with an error of its own world (a Python exception, say): the
/// computation is abandoned, not retried. Deliberately not a NumericalError, which fits and
/// line searches treat as a rejected trial point. Whoever registers a callback may throw a
/// subclass carrying the original error and catch that subclass where the call returns.
class XcCallbackError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

}  // namespace stillpoint
