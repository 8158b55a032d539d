#include "stillpoint/xc/formula.hpp"

#include <algorithm>
#include <cctype>
#include <cmath>
#include <limits>
#include <numbers>
#include <sstream>

namespace stillpoint {

namespace {

enum class Var { N, NUp, NDown, Zeta, Rs, Sigma, S2, S };

// The formula is compiled to postfix order and evaluated with an explicit value stack, so
// neither parsing, evaluation nor destruction recurses: an expression's length or nesting
// can exhaust neither the call stack nor anything but the limits checked at compile time.
enum class Op { Number, Variable, Parameter, Neg, Add, Sub, Mul, Div, Pow, IntPow, Func1, Pow2, Max, Min };
enum class Fn { Exp, Log, Sqrt, Cbrt, Sin, Cos, Tanh, Atan, Asinh, Pow, Max, Min };

struct Instr {
  Op op = Op::Number;
  double number = 0.0;  // Number; exponent of IntPow
  Var var = Var::N;
  int index = 0;  // parameter index
  Fn fn = Fn::Exp;
};

struct FnInfo {
  const char* name;
  Fn fn;
  int arity;
};
constexpr FnInfo kFunctions[] = {{"exp", Fn::Exp, 1},   {"log", Fn::Log, 1},   {"sqrt", Fn::Sqrt, 1},
                                 {"cbrt", Fn::Cbrt, 1}, {"sin", Fn::Sin, 1},   {"cos", Fn::Cos, 1},
                                 {"tanh", Fn::Tanh, 1}, {"atan", Fn::Atan, 1}, {"asinh", Fn::Asinh, 1},
                                 {"pow", Fn::Pow, 2},   {"max", Fn::Max, 2},   {"min", Fn::Min, 2}};

const std::vector<std::pair<std::string, Var>>& variable_names() {
  static const std::vector<std::pair<std::string, Var>> vars = {
      {"n", Var::N},   {"n_up", Var::NUp},       {"n_down", Var::NDown}, {"zeta", Var::Zeta},
      {"rs", Var::Rs}, {"sigma", Var::Sigma},    {"s2", Var::S2},        {"s", Var::S}};
  return vars;
}

struct Inputs {
  Jet n, nu, nd, zeta, rs, sigma, s2, s;
};

// max/min take the derivatives of the branch they select: exact away from a tie, one-sided
// at it, which is what a guard such as max(n - 0.1, 1e-12) needs.
Jet select_max(const Jet& a, const Jet& b) { return b.value() > a.value() ? b : a; }
Jet select_min(const Jet& a, const Jet& b) { return b.value() < a.value() ? b : a; }

Jet int_pow(const Jet& a, int c) {
  Jet r = a.constant(1.0);
  for (int i = 0; i < std::abs(c); ++i) r = r * a;
  return c < 0 ? 1.0 / r : r;
}

// Integer exponents up to this size are evaluated by repeated multiplication, which is
// defined for negative bases (n_up - n_down, zeta) where exp(c log x) is not.
constexpr double kLargestIntegerPower = 8;

/// Longest run of pending operands an evaluation may need (a right-nested chain such as
/// a^a^a^... needs one per link); beyond it the formula is refused rather than evaluated
/// with a value stack of unbounded size at every grid point.
constexpr std::size_t kMaxPending = 1000;

class Program {
 public:
  std::vector<Instr> code;
  std::size_t depth = 0;  // largest value-stack size during evaluation

  Jet run(const Inputs& in, const std::vector<Jet>& p) const {
    thread_local std::vector<Jet> st;
    st.clear();
    st.reserve(depth);
    for (const Instr& c : code) {
      switch (c.op) {
        case Op::Number: st.push_back(in.n.constant(c.number)); break;
        case Op::Parameter: st.push_back(p[c.index]); break;
        case Op::Variable: st.push_back(variable(in, c.var)); break;
        case Op::Neg: st.back() = -st.back(); break;
        case Op::IntPow: st.back() = int_pow(st.back(), static_cast<int>(c.number)); break;
        case Op::Func1: st.back() = function(c.fn, st.back()); break;
        default: {
          const Jet b = st.back();
          st.pop_back();
          Jet& a = st.back();
          switch (c.op) {
            case Op::Add: a = a + b; break;
            case Op::Sub: a = a - b; break;
            case Op::Mul: a = a * b; break;
            case Op::Div: a = a / b; break;
            case Op::Pow:
            case Op::Pow2: a = pow(a, b); break;
            case Op::Max: a = select_max(a, b); break;
            case Op::Min: a = select_min(a, b); break;
            default: throw std::logic_error("formula: bad instruction");
          }
        }
      }
    }
    if (st.size() != 1) throw std::logic_error("formula: unbalanced program");
    return st.back();
  }

  static Jet variable(const Inputs& in, Var v) {
    switch (v) {
      case Var::N: return in.n;
      case Var::NUp: return in.nu;
      case Var::NDown: return in.nd;
      case Var::Zeta: return in.zeta;
      case Var::Rs: return in.rs;
      case Var::Sigma: return in.sigma;
      case Var::S2: return in.s2;
      case Var::S: return in.s;
    }
    throw std::logic_error("formula: bad variable");
  }

 private:
  static Jet function(Fn f, const Jet& a) {
    switch (f) {
      case Fn::Exp: return exp(a);
      case Fn::Log: return log(a);
      case Fn::Sqrt: return sqrt(a);
      case Fn::Cbrt: return cbrt(a);
      case Fn::Sin: return sin(a);
      case Fn::Cos: return cos(a);
      case Fn::Tanh: return tanh(a);
      case Fn::Atan: return atan(a);
      case Fn::Asinh: return asinh(a);
      default: break;
    }
    throw std::logic_error("formula: bad function");
  }
};

// Shunting-yard over the precedence levels (low to high) + -, * /, prefix minus, ^; ^ is
// right-associative and binds tighter than a prefix minus on its left (-2^2 = -4) while its
// exponent may carry its own sign (2^-3).
class Parser {
 public:
  Parser(const FormulaSpec& spec) : spec_(spec), s_(spec.expression) {}

  Program parse() {
    bool operand = true;  // expecting an operand (or a prefix sign)
    for (;;) {
      skip();
      if (pos_ >= s_.size()) break;
      const char c = s_[pos_];
      if (operand) {
        if (c == '-' || c == '+') {
          ++pos_;
          if (c == '-') ops_.push_back({Pending::Neg, pos_ - 1});
          continue;
        }
        if (c == '(') {
          ops_.push_back({Pending::Paren, pos_});
          ++pos_;
          continue;
        }
        read_operand();  // may push a function marker and leave `operand` true
        operand = !last_was_value_;
        continue;
      }
      if (c == '+' || c == '-' || c == '*' || c == '/' || c == '^') {
        const Pending::Kind k = c == '+' ? Pending::Add : c == '-' ? Pending::Sub : c == '*' ? Pending::Mul
                                : c == '/' ? Pending::Div : Pending::Pow;
        while (!ops_.empty() && is_operator(ops_.back().kind) &&
               (precedence(ops_.back().kind) > precedence(k) || (precedence(ops_.back().kind) == precedence(k) && k != Pending::Pow)))
          pop_operator();
        ops_.push_back({k, pos_});
        ++pos_;
        operand = true;
        continue;
      }
      if (c == ')' || c == ',') {
        while (!ops_.empty() && is_operator(ops_.back().kind)) pop_operator();
        if (ops_.empty()) fail("unexpected '" + std::string(1, c) + "'");
        Pending open = ops_.back();
        if (c == ',') {
          if (open.kind != Pending::Function) fail("unexpected ','");
          const FnInfo& f = kFunctions[open.function];
          if (++ops_.back().args > f.arity)
            fail(std::string("'") + f.name + "' takes " + std::to_string(f.arity) + " argument" + (f.arity == 1 ? "" : "s"));
          ++pos_;
          operand = true;
          continue;
        }
        ops_.pop_back();
        if (open.kind == Pending::Function) {
          const FnInfo& f = kFunctions[open.function];
          if (open.args != f.arity) {
            if (f.fn == Fn::Pow) fail("pow needs two arguments: pow(a, b)");
            fail(std::string("'") + f.name + "' needs " + std::to_string(f.arity) + " arguments: " + f.name + "(a, b)");
          }
          emit_function(f);
        }
        ++pos_;
        continue;
      }
      fail("unexpected '" + std::string(1, c) + "'");
    }
    if (operand) fail("expression ends too early");
    while (!ops_.empty()) {
      if (!is_operator(ops_.back().kind)) {
        pos_ = ops_.back().pos;
        if (ops_.back().kind == Pending::Function)
          fail(std::string("missing ')' after the argument of '") + kFunctions[ops_.back().function].name + "'");
        fail("missing ')'");
      }
      pop_operator();
    }
    if (depth_ != 1) throw std::logic_error("formula: unbalanced parse");
    prog_.depth = max_depth_;
    return std::move(prog_);
  }
  bool uses_gradient() const { return gradient_; }

 private:
  struct Pending {
    enum Kind { Add, Sub, Mul, Div, Neg, Pow, Paren, Function } kind;
    std::size_t pos = 0;
    int function = 0;  // index into kFunctions
    int args = 1;
  };
  static bool is_operator(Pending::Kind k) { return k != Pending::Paren && k != Pending::Function; }
  static int precedence(Pending::Kind k) {
    switch (k) {
      case Pending::Add:
      case Pending::Sub: return 1;
      case Pending::Mul:
      case Pending::Div: return 2;
      case Pending::Neg: return 3;
      case Pending::Pow: return 4;
      default: return 0;
    }
  }

  [[noreturn]] void fail(const std::string& what) const {
    SourceLocation w = spec_.where;
    std::ostringstream m;
    m << "formula '" << spec_.name << "', column " << pos_ + 1 << " of ";
    if (s_.size() <= 200)
      m << '"' << s_ << '"';
    else
      m << "its " << s_.size() << "-character expression";
    m << ": " << what;
    if (w.column <= 0) w.column = static_cast<int>(pos_) + 1;
    throw InputError(w, m.str());
  }
  void skip() {
    while (pos_ < s_.size() && std::isspace(static_cast<unsigned char>(s_[pos_]))) ++pos_;
  }

  void push_value(Instr i) {
    prog_.code.push_back(i);
    if (++depth_ > max_depth_) {
      max_depth_ = depth_;
      if (max_depth_ > kMaxPending) {
        std::ostringstream m;
        m << "the expression nests too deeply: evaluating it would hold more than " << kMaxPending
          << " unfinished operands at once (for example a chain a^b^c^... or a*(b*(c*...))); "
          << "write it with fewer nested levels";
        fail(m.str());
      }
    }
  }
  void pop_operator() {
    const Pending p = ops_.back();
    ops_.pop_back();
    Instr i;
    switch (p.kind) {
      case Pending::Neg:
        // A signed constant stays a constant, so that 2^-3 is an integer power.
        if (!prog_.code.empty() && prog_.code.back().op == Op::Number) {
          prog_.code.back().number = -prog_.code.back().number;
          return;
        }
        i.op = Op::Neg;
        prog_.code.push_back(i);
        return;
      case Pending::Pow:
        if (prog_.code.back().op == Op::Number) {
          const double c = prog_.code.back().number;
          if (c == std::round(c) && std::abs(c) <= kLargestIntegerPower) {
            prog_.code.back().op = Op::IntPow;
            --depth_;
            return;
          }
        }
        i.op = Op::Pow;
        break;
      case Pending::Add: i.op = Op::Add; break;
      case Pending::Sub: i.op = Op::Sub; break;
      case Pending::Mul: i.op = Op::Mul; break;
      case Pending::Div: i.op = Op::Div; break;
      default: throw std::logic_error("formula: not an operator");
    }
    prog_.code.push_back(i);
    --depth_;
  }
  void emit_function(const FnInfo& f) {
    Instr i;
    i.fn = f.fn;
    if (f.arity == 1) {
      i.op = Op::Func1;
    } else {
      i.op = f.fn == Fn::Pow ? Op::Pow2 : f.fn == Fn::Max ? Op::Max : Op::Min;
      --depth_;
    }
    prog_.code.push_back(i);
  }

  // One number, name or function head at pos_.
  void read_operand() {
    last_was_value_ = true;
    const char c = s_[pos_];
    if (std::isdigit(static_cast<unsigned char>(c)) || c == '.') {
      const char* begin = s_.c_str() + pos_;
      char* end = nullptr;
      const double v = std::strtod(begin, &end);
      if (end == begin) fail("malformed number");
      if (!std::isfinite(v)) fail("number out of range");
      pos_ += static_cast<std::size_t>(end - begin);
      Instr i;
      i.number = v;
      push_value(i);
      return;
    }
    if (std::isalpha(static_cast<unsigned char>(c)) || c == '_') {
      const std::size_t start = pos_;
      while (pos_ < s_.size() && (std::isalnum(static_cast<unsigned char>(s_[pos_])) || s_[pos_] == '_')) ++pos_;
      const std::string id = s_.substr(start, pos_ - start);
      for (int k = 0; k < static_cast<int>(std::size(kFunctions)); ++k)
        if (id == kFunctions[k].name) {
          skip();
          if (pos_ >= s_.size() || s_[pos_] != '(') fail("function '" + id + "' needs '('");
          ops_.push_back({Pending::Function, start, k, 1});
          ++pos_;
          last_was_value_ = false;
          return;
        }
      Instr i;
      if (id == "pi") {
        i.number = std::numbers::pi;
        push_value(i);
        return;
      }
      for (const auto& [nm, v] : variable_names())
        if (nm == id) {
          i.op = Op::Variable;
          i.var = v;
          if (v == Var::Sigma || v == Var::S2 || v == Var::S) gradient_ = true;
          push_value(i);
          return;
        }
      for (std::size_t k = 0; k < spec_.parameter_names.size(); ++k)
        if (spec_.parameter_names[k] == id) {
          i.op = Op::Parameter;
          i.index = static_cast<int>(k);
          push_value(i);
          return;
        }
      std::vector<std::string> known = spec_.parameter_names;
      for (const auto& [nm, v] : variable_names()) known.push_back(nm);
      for (const auto& f : kFunctions) known.emplace_back(f.name);
      const std::string near = nearest_word(id, known);
      pos_ = start;
      fail("unknown name '" + id + "'" + (near.empty() ? "" : "; did you mean '" + near + "'?"));
    }
    fail("unexpected '" + std::string(1, c) + "'");
  }

  const FormulaSpec& spec_;
  std::string s_;
  std::size_t pos_ = 0;
  bool gradient_ = false;
  bool last_was_value_ = true;
  std::vector<Pending> ops_;
  Program prog_;
  std::size_t depth_ = 0, max_depth_ = 0;
};

Inputs make_inputs(const Jet& nu, const Jet& nd, const Jet& suu, const Jet& sud, const Jet& sdd,
                   const XcSettings& settings) {
  Inputs in;
  in.nu = nu;
  in.nd = nd;
  in.n = nu + nd;
  in.zeta = (nu - nd) / in.n;
  in.sigma = suu + 2.0 * sud + sdd;
  if (settings.one_dimensional) {
    in.rs = 0.5 / in.n;
    in.s2 = in.sigma / (std::numbers::pi * std::numbers::pi * pow(in.n, 4.0));
  } else {
    in.rs = pow(3.0 / (4.0 * std::numbers::pi) / in.n, 1.0 / 3.0);
    static const double c = 1.0 / (4.0 * std::pow(3.0 * std::numbers::pi * std::numbers::pi, 2.0 / 3.0));
    in.s2 = c * in.sigma / pow(in.n, 8.0 / 3.0);
  }
  in.s = sqrt(in.s2);
  return in;
}

class FormulaFamily final : public ModelFamily {
 public:
  FormulaFamily(const FormulaSpec& spec) : spec_(spec) {
    Parser p(spec);
    program_ = p.parse();
    gradient_ = p.uses_gradient();
  }
  std::string name() const override { return spec_.name; }
  std::string label() const override { return "formula:" + spec_.name; }
  bool needs_gradient() const override { return gradient_; }
  std::vector<std::string> parameter_names() const override { return spec_.parameter_names; }
  std::vector<double> default_parameters() const override { return spec_.parameter_values; }
  Jet energy(const Jet& nu, const Jet& nd, const Jet& suu, const Jet& sud, const Jet& sdd, const std::vector<Jet>& p,
             const XcSettings& settings) const override {
    const Inputs in = make_inputs(nu, nd, suu, sud, sdd, settings);
    const Jet v = program_.run(in, p);
    return spec_.per_volume ? v : in.n * v;
  }
  std::string describe_point(double nu, double nd, double suu, double sud, double sdd,
                             const XcSettings& settings) const override {
    const Inputs in = make_inputs(Jet(nu, 0, 1), Jet(nd, 0, 1), Jet(suu, 0, 1), Jet(sud, 0, 1), Jet(sdd, 0, 1), settings);
    std::ostringstream m;
    m.precision(17);
    const char* sep = "";
    for (const auto& [nm, v] : variable_names()) {
      if (!gradient_ && (v == Var::Sigma || v == Var::S2 || v == Var::S)) continue;
      m << sep << nm << " = " << Program::variable(in, v).value();
      sep = ", ";
    }
    return m.str();
  }

 private:
  FormulaSpec spec_;
  Program program_;
  bool gradient_ = false;
};

}  // namespace

std::shared_ptr<const ModelFamily> compile_formula(const FormulaSpec& spec) {
  if (spec.parameter_names.size() != spec.parameter_values.size())
    throw InputError(spec.where, "formula '" + spec.name + "': every parameter needs a value");
  if (spec.parameter_names.size() + 6 > static_cast<std::size_t>(Jet::kMaxVars) + 64)
    throw InputError(spec.where, "formula '" + spec.name + "' has too many parameters");
  return std::make_shared<FormulaFamily>(spec);
}

}  // namespace stillpoint
