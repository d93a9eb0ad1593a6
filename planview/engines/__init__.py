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
- optionally ``repair(parsed)``: fix figures the engine prints too coarsely (after totals);
- optionally ``ALIASES``: other names users call the engine by (``postgres``, ``pg``).

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

__all__ = ["BROKEN", "Engine", "aliases", "detect", "engine_of", "engines", "formats", "get"]

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


def aliases() -> dict[str, str]:
    """Every name an engine is known by (its own, and the spellings its module lists in
    ``ALIASES``), lower-cased, to the engine's name."""
    names: dict[str, str] = {}
    for name, module in engines().items():
        for alias in getattr(module, "ALIASES", ()):
            names.setdefault(alias.lower(), name)
        names[name.lower()] = name
    return names


def formats() -> tuple[str, ...]:
    """Every format some engine reads, in a stable order."""
    return tuple(sorted({fmt for module in engines().values() for fmt in module.FORMATS}))


def get(name: str) -> ModuleType:
    """The engine module of a name or one of its spellings (``postgres``, ``pg``...)."""
    found = aliases().get(name.strip().lower())
    if found is None:
        known = ", ".join(sorted(engines()))
        raise PlanParseError(f"unknown engine {name!r}; known engines: {known}") from None
    return engines()[found]


def detect(text: str, engine: str | None = None, fmt: str | None = None) -> tuple[ModuleType, str]:
    """The engine module and format a text is written in, by the best score any module gives.

    A forced `fmt` is taken where an engine reads the text in it, or where no engine recognises
    the text at all (with `engine`, the reader then decides); a text that is recognisably in
    another format is refused, so that JSON forced through a text reader cannot pass as a plan."""
    if not text.strip():
        raise PlanParseError("the input is empty", line=1)
    candidates = [get(engine)] if engine else list(engines().values())
    best: tuple[float, ModuleType, str] | None = None
    elsewhere: tuple[float, ModuleType, str] | None = None
    for module in candidates:
        guess = module.detect(text)
        if guess is None:
            continue
        found_fmt, score = guess
        if fmt is not None and found_fmt != fmt:
            if elsewhere is None or score > elsewhere[0]:
                elsewhere = (score, module, found_fmt)
            continue
        if best is None or score > best[0]:
            best = (score, module, found_fmt)
    if best is not None:
        return best[1], best[2]
    if elsewhere is None and engine and fmt:
        return get(engine), fmt
    # only an error needs the first line: splitting a large plan into lines costs more than detecting it
    first = next((i for i, line in enumerate(text.splitlines(), 1) if line.strip()), 1)
    if elsewhere is not None:
        _, module, found_fmt = elsewhere
        raise PlanParseError(f"format {fmt!r} was forced, but this is a {module.NAME} plan in "
                             f"{found_fmt} format; force {found_fmt!r} or let the format be detected",
                             line=first)
    if engine:
        name = get(engine).NAME
        formats = ", ".join(get(engine).FORMATS)
        raise PlanParseError(f"this does not look like a {name} plan ({formats})"
                             + (f" in {fmt} format" if fmt else ""), line=first)
    raise PlanParseError(
        "this does not look like a query plan of any known engine "
        f"({', '.join(sorted(engines()))}); pass engine= and fmt= to force one",
        line=first,
    )
