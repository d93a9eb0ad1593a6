"""Engine modules, found by asking each one whether a text is its own.

An engine module is any module in this package (or one registered under the entry-point
group ``planview.engines``) that defines:

- ``NAME``: the engine's name in reports (``"postgresql"``);
- ``FORMATS``: the output formats it reads;
- ``SQL_DIALECT``: the sqlglot dialect its conditions are written in;
- ``detect(text) -> (format, score) | None``: a score in 0..1 when the text looks like its own;
- ``parse(text, fmt) -> ParsedPlan``;
- ``ENGINE``: an instance of a subclass of `base.Engine` that sets the engine's tables (which
  operators join, block, limit, read a whole relation, where group keys live...) and overrides
  a hook only where no table can say it; and ``role = ENGINE.role``;
- optionally ``repair(parsed)``: fix figures the engine prints too coarsely (after totals).

A module without ``ENGINE`` (an older plug-in) is read through its functions (``role``,
``suggest_fix``, ``SQL_DIALECT``, ``DEFAULT_SELECTIVITIES``) by `base.engine_of`.
Adding an engine means adding one module here; nothing else changes.
"""

from __future__ import annotations

import importlib
import pkgutil
from functools import lru_cache
from importlib import metadata
from types import ModuleType

from ..errors import PlanParseError
from .base import Engine, engine_of

__all__ = ["BROKEN", "Engine", "detect", "engine_of", "engines", "get"]

BROKEN: dict[str, str] = {}
"""Engine modules that failed to import, with the error (tests assert this stays empty)."""

REQUIRED = ("NAME", "FORMATS", "detect", "parse", "role")


@lru_cache(maxsize=1)
def engines() -> dict[str, ModuleType]:
    """Every engine module, built-in ones first, by name."""
    found: dict[str, ModuleType] = {}
    for info in sorted(pkgutil.iter_modules(__path__), key=lambda m: m.name):
        if info.name.startswith("_"):
            continue
        try:
            module = importlib.import_module(f"{__name__}.{info.name}")
        except Exception as exc:  # one broken module must not take the others down
            BROKEN[info.name] = f"{type(exc).__name__}: {exc}"
            continue
        if all(hasattr(module, attr) for attr in REQUIRED):
            found[module.NAME] = module
    for entry in metadata.entry_points(group="planview.engines"):
        try:
            module = entry.load()
        except Exception:  # a broken plug-in must not stop the built-in engines
            continue
        if all(hasattr(module, attr) for attr in REQUIRED):
            found.setdefault(module.NAME, module)
    return found


def get(name: str) -> ModuleType:
    try:
        return engines()[name]
    except KeyError:
        known = ", ".join(sorted(engines()))
        raise PlanParseError(f"unknown engine {name!r}; known engines: {known}") from None


def detect(text: str, engine: str | None = None, fmt: str | None = None) -> tuple[ModuleType, str]:
    """The engine module and format a text is written in, by the best score any module gives."""
    if not text.strip():
        raise PlanParseError("the input is empty", line=1)
    candidates = [get(engine)] if engine else list(engines().values())
    best: tuple[float, ModuleType, str] | None = None
    for module in candidates:
        if fmt is not None and fmt not in module.FORMATS:
            continue
        guess = module.detect(text)
        if guess is None:
            continue
        found_fmt, score = guess
        if fmt is not None and found_fmt != fmt:
            found_fmt, score = fmt, score / 2
        if best is None or score > best[0]:
            best = (score, module, found_fmt)
    if best is None:
        if engine and fmt:
            return get(engine), fmt
        first = next((i for i, line in enumerate(text.splitlines(), 1) if line.strip()), 1)
        if engine:
            formats = ", ".join(get(engine).FORMATS)
            raise PlanParseError(f"this does not look like a {engine} plan ({formats})"
                                 + (f" in {fmt} format" if fmt else ""), line=first)
        raise PlanParseError(
            "this does not look like a query plan of any known engine "
            f"({', '.join(sorted(engines()))}); pass engine= and fmt= to force one",
            line=first,
        )
    return best[1], best[2]
