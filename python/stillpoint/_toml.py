"""Writes Python dicts as TOML text for the library's input readers.

The readers (docs/input.md, docs/grad.md, ...) do all validation and name the key path of any
error, so inputs given as dicts are turned into the same text a file would hold. Only what
those inputs use is supported: tables, arrays of tables, strings, numbers, booleans, lists.
"""
import math
import numbers

__all__ = ["dumps"]


def _key(k):
    k = str(k)
    if k and all(c.isalnum() or c in "_-" for c in k):
        return k
    return _string(k)


def _string(s):
    out = ['"']
    for c in s:
        if c == '"':
            out.append('\\"')
        elif c == "\\":
            out.append("\\\\")
        elif ord(c) < 0x20 or ord(c) == 0x7F:
            out.append("\\u%04x" % ord(c))
        else:
            out.append(c)
    out.append('"')
    return "".join(out)


def _value(v, path):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, numbers.Integral):
        return str(int(v))
    if isinstance(v, numbers.Real):
        x = float(v)
        if math.isnan(x):
            return "nan"
        if math.isinf(x):
            return "inf" if x > 0 else "-inf"
        return repr(x)
    if isinstance(v, str):
        return _string(v)
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{_key(k)} = {_value(x, f'{path}.{k}')}" for k, x in v.items()) + " }"
    if hasattr(v, "tolist"):  # NumPy arrays and scalars
        return _value(v.tolist(), path)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_value(x, f"{path}[{i}]") for i, x in enumerate(v)) + "]"
    raise TypeError(f"{path}: cannot write a {type(v).__name__} as an input value")


def _is_table_list(v):
    return isinstance(v, (list, tuple)) and len(v) > 0 and all(isinstance(x, dict) for x in v)


def _emit(table, prefix, lines):
    scalars = [(k, v) for k, v in table.items() if not isinstance(v, dict) and not _is_table_list(v)]
    for k, v in scalars:
        if v is None:
            continue
        lines.append(f"{_key(k)} = {_value(v, prefix + str(k))}")
    for k, v in table.items():
        name = prefix + _key(k)
        if isinstance(v, dict):
            lines.append("")
            lines.append(f"[{name}]")
            _emit(v, name + ".", lines)
        elif _is_table_list(v):
            for item in v:
                lines.append("")
                lines.append(f"[[{name}]]")
                _emit(item, name + ".", lines)


def dumps(document):
    """TOML text of a dict (top-level keys first, then tables, then arrays of tables)."""
    if not isinstance(document, dict):
        raise TypeError("an input document must be a dict")
    lines = []
    _emit(document, "", lines)
    return "\n".join(lines) + "\n"
