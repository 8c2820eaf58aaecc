"""TOML configs parsed once, at the edge, into frozen typed objects.

Every problem is reported as one line naming the key path and what was expected, e.g.
``shape.cos[2]: expected a number, got 'x'``. Section parsers live in ``SECTIONS``; a
capability that adds a config section adds a field to :class:`Config` and one parser.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, fields
from pathlib import Path
from typing import Any, Callable

from .errors import ConfigError
from .families import FAMILIES, Disk, Ellipse, FourierCurve, Polar, ShapeFamily, Support
from .scanspec import HuntSpec, ScanSpec, parse_hunt, parse_scan
from .searchspec import InvariantOptions, SearchSpec, parse_invariants, parse_search
from .symmetry import KINDS, Symmetry

_MISSING = object()


def _show(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


class Reader:
    """Typed access to one TOML table; ``done()`` rejects keys nobody asked for."""

    def __init__(self, table: dict, path: str):
        if not isinstance(table, dict):
            raise ConfigError(f"{path}: expected a table, got {_show(table)}")
        self.table, self.path, self.used = table, path, set()

    def key(self, name: str) -> str:
        return f"{self.path}.{name}" if self.path else name

    def has(self, name: str) -> bool:
        return name in self.table

    def _get(self, name: str, default: Any):
        self.used.add(name)
        if name in self.table:
            return self.table[name]
        if default is _MISSING:
            raise ConfigError(f"{self.key(name)}: missing (required)")
        return default

    def number(self, name: str, default: Any = _MISSING, minimum: float | None = None,
               maximum: float | None = None, positive: bool = False) -> float:
        value = self._get(name, default)
        if value is default and default is not _MISSING:
            return value
        if not _is_number(value):
            raise ConfigError(f"{self.key(name)}: expected a number, got {_show(value)}")
        return _bounded(self.key(name), float(value), minimum, maximum, positive)

    def integer(self, name: str, default: Any = _MISSING, minimum: int | None = None,
                maximum: int | None = None) -> int:
        value = self._get(name, default)
        if value is default and default is not _MISSING:
            return value
        if not isinstance(value, int) or isinstance(value, bool):
            raise ConfigError(f"{self.key(name)}: expected an integer, got {_show(value)}")
        return int(_bounded(self.key(name), value, minimum, maximum, False))

    def boolean(self, name: str, default: Any = _MISSING) -> bool:
        value = self._get(name, default)
        if not isinstance(value, bool):
            raise ConfigError(f"{self.key(name)}: expected true or false, got {_show(value)}")
        return value

    def string(self, name: str, default: Any = _MISSING, choices=None) -> str:
        value = self._get(name, default)
        if value is default and default is not _MISSING:
            return value
        if not isinstance(value, str):
            raise ConfigError(f"{self.key(name)}: expected a string, got {_show(value)}")
        if choices is not None and value not in choices:
            raise ConfigError(
                f"{self.key(name)}: expected one of {', '.join(map(repr, choices))}, got {value!r}")
        return value

    def numbers(self, name: str, default: Any = _MISSING, length: int | None = None) -> tuple:
        value = self._get(name, default)
        if value is default and default is not _MISSING:
            return tuple(value)
        if not isinstance(value, list):
            raise ConfigError(f"{self.key(name)}: expected a list of numbers, got {_show(value)}")
        for i, item in enumerate(value):
            if not _is_number(item):
                raise ConfigError(f"{self.key(name)}[{i}]: expected a number, got {_show(item)}")
        if length is not None and len(value) != length:
            raise ConfigError(f"{self.key(name)}: expected {length} numbers, got {len(value)}")
        return tuple(float(v) for v in value)

    def strings(self, name: str, default: Any = _MISSING, choices=None) -> tuple:
        value = self._get(name, default)
        if value is default and default is not _MISSING:
            return tuple(value)
        if not isinstance(value, list):
            raise ConfigError(f"{self.key(name)}: expected a list of strings, got {_show(value)}")
        for i, item in enumerate(value):
            if not isinstance(item, str):
                raise ConfigError(f"{self.key(name)}[{i}]: expected a string, got {_show(item)}")
            if choices is not None and item not in choices:
                raise ConfigError(f"{self.key(name)}[{i}]: expected one of "
                                  f"{', '.join(map(repr, choices))}, got {item!r}")
        return tuple(value)

    def sub(self, name: str, default: Any = _MISSING) -> "Reader | None":
        value = self._get(name, default)
        if value is None:
            return None
        return Reader(value, self.key(name))

    def raw(self, name: str, default: Any = _MISSING) -> Any:
        return self._get(name, default)

    def done(self) -> None:
        unknown = [k for k in self.table if k not in self.used]
        if unknown:
            known = sorted(self.used)
            hint = f" (expected one of: {', '.join(known)})" if known else ""
            raise ConfigError(f"{self.key(unknown[0])}: unknown key{hint}")


def _bounded(key, value, minimum, maximum, positive):
    if positive and not value > 0:
        raise ConfigError(f"{key}: expected a positive number, got {value:g}")
    if minimum is not None and value < minimum:
        raise ConfigError(f"{key}: expected a value >= {minimum:g}, got {value:g}")
    if maximum is not None and value > maximum:
        raise ConfigError(f"{key}: expected a value <= {maximum:g}, got {value:g}")
    return value


def _symmetry(r: Reader) -> Symmetry:
    kind = r.string("symmetry", "none", choices=KINDS)
    if kind in ("rotational", "dihedral"):
        order = r.integer("order", minimum=2, maximum=64)
    else:
        order = r.integer("order", 1, minimum=1, maximum=1) if r.has("order") else 1
    return Symmetry(kind, order)


def parse_shape(r: Reader) -> ShapeFamily:
    """[shape] table → a shape family holding the configured coefficients."""
    family = r.string("family", choices=tuple(FAMILIES))
    fix_scale = r.boolean("fix_scale", False)
    try:
        if family in ("polar", "support"):
            scale_key = "radius" if family == "polar" else "mean"
            scale = r.number(scale_key, positive=True)
            cos, sin = r.numbers("cos", ()), r.numbers("sin", ())
            modes = r.integer("modes", max(len(cos), len(sin), 1), minimum=1, maximum=512)
            if max(len(cos), len(sin)) > modes:
                raise ConfigError(f"{r.key('modes')}: expected at least {max(len(cos), len(sin))}"
                                  f" (the length of cos/sin), got {modes}")
            sym = _symmetry(r)
            cls = Polar if family == "polar" else Support
            built = cls.build(scale, cos, sin, modes, sym, fix_scale)
        elif family == "curve":
            terms = _terms(r)
            size = max([abs(k) for k, _, _ in terms] + [1])
            modes = r.integer("modes", size, minimum=1, maximum=512)
            if size > modes:
                raise ConfigError(f"{r.key('modes')}: expected at least {size} "
                                  f"(the largest |k| in terms), got {modes}")
            built = FourierCurve.build(terms, modes, _symmetry(r), fix_scale)
        elif family == "ellipse":
            built = Ellipse.build(r.number("a", positive=True), r.number("b", positive=True),
                                  fix_scale)
        else:
            built = Disk.build(r.number("radius", positive=True), fix_scale)
    except ValueError as err:
        raise ConfigError(f"{r.path}.{err}") from None
    r.done()
    return built


def _terms(r: Reader) -> list[tuple[int, float, float]]:
    value = r.raw("terms")
    key = r.key("terms")
    if not isinstance(value, list) or not value:
        raise ConfigError(f"{key}: expected a non-empty list of [k, re, im] triples")
    out, seen = [], set()
    for i, item in enumerate(value):
        ok = (isinstance(item, list) and len(item) == 3 and isinstance(item[0], int)
              and not isinstance(item[0], bool) and all(_is_number(x) for x in item[1:]))
        if not ok:
            raise ConfigError(f"{key}[{i}]: expected [k, re, im] with integer k, got {_show(item)}")
        if item[0] in seen:
            raise ConfigError(f"{key}[{i}]: mode k = {item[0]} appears twice")
        seen.add(item[0])
        out.append((int(item[0]), float(item[1]), float(item[2])))
    return out


@dataclass(frozen=True)
class MeasureSpec:
    """[measure]: quadrature nodes for boundary integrals."""

    resolution: int = 256


def parse_measure(r: Reader) -> MeasureSpec:
    spec = MeasureSpec(resolution=r.integer("resolution", 256, minimum=32, maximum=8192))
    r.done()
    return spec


@dataclass(frozen=True)
class Config:
    """A parsed config file; ``text`` is kept verbatim for records."""

    text: str
    source: str
    shape: ShapeFamily | None = None
    measure: MeasureSpec = MeasureSpec()
    search: SearchSpec | None = None
    invariants: InvariantOptions = InvariantOptions()
    scan: ScanSpec | None = None
    hunt: HuntSpec | None = None


SECTIONS: dict[str, Callable[[Reader], Any]] = {
    "shape": parse_shape,
    "measure": parse_measure,
    "search": parse_search,
    "invariants": parse_invariants,
    "scan": parse_scan,
    "hunt": parse_hunt,
}


def parse_config(text: str, source: str = "<config>") -> Config:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise ConfigError(f"{source}: not valid TOML ({err})") from None
    top = Reader(data, "")
    values = {}
    for name, parser in SECTIONS.items():
        sub = top.sub(name, None)
        if sub is not None:
            values[name] = parser(sub)
    top.done()
    known = {f.name for f in fields(Config)}
    return Config(text=text, source=source, **{k: v for k, v in values.items() if k in known})


def load_config(path: str | Path) -> Config:
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(f"{path}: no such config file") from None
    except (OSError, UnicodeDecodeError) as err:
        raise ConfigError(f"{path}: cannot read config ({err.__class__.__name__})") from None
    return parse_config(text, str(path))
