#include "stillpoint/formula.hpp"

#include <cctype>
#include <cmath>
#include <numbers>
#include <sstream>

namespace stillpoint {

namespace {

enum class Var { N, NUp, NDown, Zeta, Rs, Sigma, S2, S };

struct Node {
  enum class Kind { Number, Variable, Parameter, Unary, Binary, Function } kind = Kind::Number;
  double number = 0.0;
  Var var = Var::N;
  int index = 0;     // parameter index
  char op = 0;       // '+', '-', '*', '/', '^' or 'n' (negation)
  std::string func;  // function name
  std::vector<std::unique_ptr<Node>> args;
};

struct Inputs {
  Jet n, nu, nd, zeta, rs, sigma, s2, s;
};

Jet eval(const Node& e, const Inputs& in, const std::vector<Jet>& p) {
  switch (e.kind) {
    case Node::Kind::Number:
      return in.n.constant(e.number);
    case Node::Kind::Parameter:
      return p[e.index];
    case Node::Kind::Variable:
      switch (e.var) {
        case Var::N: return in.n;
        case Var::NUp: return in.nu;
        case Var::NDown: return in.nd;
        case Var::Zeta: return in.zeta;
        case Var::Rs: return in.rs;
        case Var::Sigma: return in.sigma;
        case Var::S2: return in.s2;
        case Var::S: return in.s;
      }
      break;
    case Node::Kind::Unary:
      return -eval(*e.args[0], in, p);
    case Node::Kind::Binary: {
      const Jet a = eval(*e.args[0], in, p);
      // Integer and constant exponents use pow(x, c): defined for negative bases too.
      if (e.op == '^' && e.args[1]->kind == Node::Kind::Number) {
        const double c = e.args[1]->number;
        if (c == std::round(c) && std::abs(c) <= 8) {
          Jet r = a.constant(1.0);
          for (int i = 0; i < std::abs(static_cast<int>(c)); ++i) r = r * a;
          return c < 0 ? 1.0 / r : r;
        }
        return pow(a, c);
      }
      const Jet b = eval(*e.args[1], in, p);
      switch (e.op) {
        case '+': return a + b;
        case '-': return a - b;
        case '*': return a * b;
        case '/': return a / b;
        case '^': return pow(a, b);
      }
      break;
    }
    case Node::Kind::Function: {
      const Jet a = eval(*e.args[0], in, p);
      if (e.func == "exp") return exp(a);
      if (e.func == "log") return log(a);
      if (e.func == "sqrt") return sqrt(a);
      if (e.func == "cbrt") return cbrt(a);
      if (e.func == "sin") return sin(a);
      if (e.func == "cos") return cos(a);
      if (e.func == "tanh") return tanh(a);
      if (e.func == "atan") return atan(a);
      if (e.func == "asinh") return asinh(a);
      if (e.func == "pow") return pow(a, eval(*e.args[1], in, p));
      break;
    }
  }
  return in.n.constant(std::numeric_limits<double>::quiet_NaN());
}

class Parser {
 public:
  Parser(const FormulaSpec& spec) : spec_(spec), s_(spec.expression) {}

  std::unique_ptr<Node> parse() {
    auto e = expr();
    skip();
    if (pos_ < s_.size()) fail("unexpected '" + std::string(1, s_[pos_]) + "'");
    return e;
  }
  bool uses_gradient() const { return gradient_; }

 private:
  [[noreturn]] void fail(const std::string& what) const {
    SourceLocation w = spec_.where;
    std::ostringstream m;
    m << "formula '" << spec_.name << "', column " << pos_ + 1 << " of \"" << s_ << "\": " << what;
    if (w.column <= 0) w.column = static_cast<int>(pos_) + 1;
    throw InputError(w, m.str());
  }
  void skip() {
    while (pos_ < s_.size() && std::isspace(static_cast<unsigned char>(s_[pos_]))) ++pos_;
  }
  bool eat(char c) {
    skip();
    if (pos_ < s_.size() && s_[pos_] == c) {
      ++pos_;
      return true;
    }
    return false;
  }
  std::unique_ptr<Node> binary(char op, std::unique_ptr<Node> a, std::unique_ptr<Node> b) {
    auto n = std::make_unique<Node>();
    n->kind = Node::Kind::Binary;
    n->op = op;
    n->args.push_back(std::move(a));
    n->args.push_back(std::move(b));
    return n;
  }
  std::unique_ptr<Node> expr() {
    auto a = term();
    for (;;) {
      if (eat('+'))
        a = binary('+', std::move(a), term());
      else if (eat('-'))
        a = binary('-', std::move(a), term());
      else
        return a;
    }
  }
  std::unique_ptr<Node> term() {
    auto a = unary();
    for (;;) {
      if (eat('*'))
        a = binary('*', std::move(a), unary());
      else if (eat('/'))
        a = binary('/', std::move(a), unary());
      else
        return a;
    }
  }
  std::unique_ptr<Node> unary() {
    if (eat('-')) {
      auto n = std::make_unique<Node>();
      n->kind = Node::Kind::Unary;
      n->op = 'n';
      n->args.push_back(unary());
      return n;
    }
    if (eat('+')) return unary();
    return power();
  }
  std::unique_ptr<Node> power() {
    auto a = atom();
    if (eat('^')) return binary('^', std::move(a), unary());  // right-associative, binds tighter than unary minus on the left
    return a;
  }
  std::unique_ptr<Node> atom() {
    skip();
    if (pos_ >= s_.size()) fail("expression ends too early");
    const char c = s_[pos_];
    if (c == '(') {
      ++pos_;
      auto e = expr();
      if (!eat(')')) fail("missing ')'");
      return e;
    }
    if (std::isdigit(static_cast<unsigned char>(c)) || c == '.') {
      std::size_t used = 0;
      double v = 0.0;
      try {
        v = std::stod(s_.substr(pos_), &used);
      } catch (const std::exception&) {
        fail("malformed number");
      }
      pos_ += used;
      auto n = std::make_unique<Node>();
      n->number = v;
      return n;
    }
    if (std::isalpha(static_cast<unsigned char>(c)) || c == '_') {
      const std::size_t start = pos_;
      while (pos_ < s_.size() && (std::isalnum(static_cast<unsigned char>(s_[pos_])) || s_[pos_] == '_')) ++pos_;
      const std::string id = s_.substr(start, pos_ - start);
      static const std::vector<std::string> funcs = {"exp", "log", "sqrt", "cbrt", "sin", "cos", "tanh", "atan", "asinh", "pow"};
      if (std::find(funcs.begin(), funcs.end(), id) != funcs.end()) {
        if (!eat('(')) fail("function '" + id + "' needs '('");
        auto n = std::make_unique<Node>();
        n->kind = Node::Kind::Function;
        n->func = id;
        n->args.push_back(expr());
        if (id == "pow") {
          if (!eat(',')) fail("pow needs two arguments: pow(a, b)");
          n->args.push_back(expr());
        }
        if (!eat(')')) fail("missing ')' after the argument of '" + id + "'");
        return n;
      }
      if (id == "pi") {
        auto n = std::make_unique<Node>();
        n->number = std::numbers::pi;
        return n;
      }
      static const std::vector<std::pair<std::string, Var>> vars = {
          {"n", Var::N},      {"n_up", Var::NUp},     {"n_down", Var::NDown}, {"zeta", Var::Zeta},
          {"rs", Var::Rs},    {"sigma", Var::Sigma},  {"s2", Var::S2},        {"s", Var::S}};
      for (const auto& [nm, v] : vars)
        if (nm == id) {
          auto n = std::make_unique<Node>();
          n->kind = Node::Kind::Variable;
          n->var = v;
          if (v == Var::Sigma || v == Var::S2 || v == Var::S) gradient_ = true;
          return n;
        }
      for (std::size_t i = 0; i < spec_.parameter_names.size(); ++i)
        if (spec_.parameter_names[i] == id) {
          auto n = std::make_unique<Node>();
          n->kind = Node::Kind::Parameter;
          n->index = static_cast<int>(i);
          return n;
        }
      std::vector<std::string> known = spec_.parameter_names;
      for (const auto& [nm, v] : vars) known.push_back(nm);
      for (const auto& f : funcs) known.push_back(f);
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
};

class FormulaFamily final : public ModelFamily {
 public:
  FormulaFamily(const FormulaSpec& spec) : spec_(spec) {
    Parser p(spec);
    tree_ = p.parse();
    gradient_ = p.uses_gradient();
  }
  std::string name() const override { return spec_.name; }
  bool needs_gradient() const override { return gradient_; }
  std::vector<std::string> parameter_names() const override { return spec_.parameter_names; }
  std::vector<double> default_parameters() const override { return spec_.parameter_values; }
  Jet energy(const Jet& nu, const Jet& nd, const Jet& suu, const Jet& sud, const Jet& sdd, const std::vector<Jet>& p,
             const XcSettings& settings) const override {
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
    const Jet v = eval(*tree_, in, p);
    return spec_.per_volume ? v : in.n * v;
  }

 private:
  FormulaSpec spec_;
  std::unique_ptr<Node> tree_;
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
