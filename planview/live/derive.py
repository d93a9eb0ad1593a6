"""PostgreSQL's row estimate for a simple scan, worked again from the statistics, step by step.

The arithmetic follows the PostgreSQL manual ("How the Planner Uses Statistics", section "Row
Estimation Examples") and the source it describes:

- the table's rows: ``reltuples`` scaled to the pages the table has now,
  ``rint(reltuples / relpages * current_pages)`` (``table_block_relation_estimate_size``);
- ``column = constant`` (``var_eq_const`` in ``selfuncs.c``): 1 / rows when a unique index covers
  the column alone; a most-common value's own frequency; otherwise the rest shared among the
  other distinct values, ``(1 - sum(mcv_freqs) - null_frac) / (n_distinct - n_mcv)``, never above
  the least common listed value; a negative ``n_distinct`` is a share of the rows; ``<>`` is
  ``1 - that - null_frac``;
- ``<``, ``<=``, ``>``, ``>=`` (``scalarineqsel``, ``mcv_selectivity``,
  ``ineq_histogram_selectivity``): the most-common values that satisfy the clause, plus the
  histogram's share of the rest, interpolated linearly inside the bucket the constant falls in
  (numbers and times as numbers; strings through ``convert_string_to_scalar``'s reading of
  characters as digits), from version 11 on corrected for the constant's own share, the first and
  last bounds replaced by the current extremes when a b-tree index leads with the column
  (``get_actual_variable_range``), and kept off 0 and 1 by a hundredth of a bucket otherwise;
- ``IS NULL`` / ``IS NOT NULL`` (``nulltestsel``): ``null_frac`` or its complement;
- a boolean column alone (``boolvarsel``: ``column = true``) and ``NOT`` it (1 minus that);
- ``column = ANY (constants)`` and ``column <> ALL (constants)``, which IN and NOT IN lists
  become (``scalararraysel``): each value as one constant, the shares added as disjoint;
- several clauses (``clauselist_selectivity_ext`` in ``clausesel.c``): the product of their
  selectivities, except that a lower and an upper bound on one column are one range,
  ``hi + lo - 1`` plus the null share (the default for a range when either side was a guess);
- no statistics: the defaults in ``selfuncs.h``, read from the engine's table
  (`planview.engines.postgresql.DEFAULT_SELECTIVITIES`);
- rows: ``clamp_row_est(rows x selectivity)``, rounded half to even as C's ``rint``, at least 1.

Every function here is pure: it takes the statistics (`planview.live.stats`) and gives numbers
and sentences. `derive_plan` reads the statistics of each simple scan's table on a live
connection and attaches the result to the node as `PlanNode.derivation`.
"""

from __future__ import annotations

import datetime as _dt
import math
import re
import struct
from dataclasses import dataclass
from decimal import Decimal, InvalidOperation

from ..diagnose.clauses import parse_condition
from ..engines import postgresql as _pg
from ..errors import ProbeError
from ..probe import Budget
from ..probe.clause_sql import UnsafeClause, render_clause
from ..probe.postgresql import printable, scans_by_table, shown
from .stats import ColumnStats, TableStats, read_table_stats

DEFAULT_EQ_SEL = _pg.DEFAULT_SELECTIVITIES["DEFAULT_EQ_SEL"]
DEFAULT_INEQ_SEL = _pg.DEFAULT_SELECTIVITIES["DEFAULT_INEQ_SEL"]
DEFAULT_RANGE_INEQ_SEL = _pg.DEFAULT_SELECTIVITIES["DEFAULT_RANGE_INEQ_SEL"]
DEFAULT_NOT_UNK_SEL = _pg.DEFAULT_SELECTIVITIES["DEFAULT_NOT_UNK_SEL"]
DEFAULT_NUM_DISTINCT = _pg.DEFAULT_SELECTIVITIES["DEFAULT_NUM_DISTINCT"]
DEFAULT_UNK_SEL = _pg.DEFAULT_UNK_SEL
RESTRICTION_SCANS = _pg.RESTRICTION_SCANS
DIALECT = _pg.SQL_DIALECT

MAXIMUM_ROWCOUNT = 1e100  # costsize.c
EQ_CORRECTION_FROM = 110000
"""From PostgreSQL 11 on, ``<`` and ``>=`` take the constant's own share off the histogram's, and
the first bucket starts at that share (ineq_histogram_selectivity); the manual's examples were
printed by 8.3, before that."""

NUMBER_TYPES = {"int2", "int4", "int8", "oid", "float4", "float8", "numeric"}
STRING_TYPES = {"text", "varchar", "name", "bpchar"}
TIME_TYPES = {"date", "timestamp", "timestamptz"}
RELABELS = {"varchar": {"::text", "::varchar"}, "text": {"::text"}}
"""Casts PostgreSQL prints on a column that are relabellings (the statistics still apply)."""

_OPS = {"EQ": "=", "NEQ": "<>", "LT": "<", "LTE": "<=", "GT": ">", "GTE": ">="}
_FLIP = {"<": ">", "<=": ">=", ">": "<", ">=": "<=", "=": "=", "<>": "<>"}
_EPOCH = _dt.date(2000, 1, 1).toordinal()  # PostgreSQL's dates and timestamps count from 2000-01-01
_USECS_PER_DAY = 86_400_000_000
_ZONE = re.compile(r"([+-])(\d{2}):?(\d{2})?(?::(\d{2}))?$")


class NotDerivable(ValueError):
    """The node's estimate cannot be worked again here; the message says why."""


# ---- the planner's small rules -------------------------------------------------------------


def clamp_row_est(rows: float) -> float:
    """costsize.c: a row count is rounded (C's rint: half to even) and at least 1.

    >>> clamp_row_est(1006.97), clamp_row_est(0.15), clamp_row_est(2.5)
    (1007.0, 1.0, 2.0)
    """
    if math.isnan(rows) or rows > MAXIMUM_ROWCOUNT:
        return MAXIMUM_ROWCOUNT
    if rows <= 1.0:
        return 1.0
    return float(round(rows))


def clamp_probability(p: float) -> float:
    return 0.0 if p < 0.0 else 1.0 if p > 1.0 else p


def relation_tuples(reltuples: float, relpages: int, current_pages: int, *, version: int = 160000,
                    has_subclass: bool = False) -> tuple[float, list[str]]:
    """The table's rows as the planner counts them now: the density at the last VACUUM or
    ANALYZE times the pages it has now (table_block_relation_estimate_size in tableam.c)."""
    if current_pages == 0:
        return 0.0, ["The table has no pages now, so the planner counts 0 rows."]
    pages = current_pages
    never = reltuples < 0 if version >= 140000 else relpages == 0
    if pages < 10 and never and not has_subclass:
        pages = 10
    if not (reltuples >= 0 and relpages > 0):
        raise NotDerivable("the table has not been vacuumed or analyzed since it got its pages, so the "
                           "planner guesses its rows from the column widths, which planview does not redo")
    tuples = float(round(reltuples / relpages * pages))
    if pages == relpages:
        said = (f"The table had {_n(reltuples)} rows in {relpages:,} pages at the last VACUUM or ANALYZE "
                f"and has {pages:,} pages now: {_n(tuples)} rows.")
    else:
        said = (f"The table had {_n(reltuples)} rows in {relpages:,} pages at the last VACUUM or ANALYZE "
                f"and has {pages:,} pages now, so the planner scales the rows: {_n(reltuples)} / "
                f"{relpages:,} x {pages:,} = {_n(tuples)} rows.")
    return tuples, [said]


def distinct_values(column: ColumnStats | None, tuples: float) -> tuple[float, bool, str]:
    """get_variable_numdistinct: (distinct values, whether it is a default, how it was found)."""
    stadistinct, nullfrac = 0.0, 0.0
    if column is not None and column.analyzed:
        stadistinct, nullfrac = column.n_distinct or 0.0, column.null_frac or 0.0
    elif column is not None and column.type_name == "bool":
        stadistinct = 2.0
    if column is not None and column.unique_index:
        stadistinct = -1.0 * (1.0 - nullfrac)
    if stadistinct > 0.0:
        return clamp_row_est(stadistinct), False, f"n_distinct {_g(stadistinct)}"
    if tuples <= 0.0:
        return DEFAULT_NUM_DISTINCT, True, f"no rows to go by: DEFAULT_NUM_DISTINCT {DEFAULT_NUM_DISTINCT:g}"
    if stadistinct < 0.0:
        found = clamp_row_est(-stadistinct * tuples)
        return found, False, f"n_distinct {_g(stadistinct)}, a share of the rows: {_g(-stadistinct)} x {_n(tuples)} = {_n(found)}"
    if tuples < DEFAULT_NUM_DISTINCT:
        found = clamp_row_est(tuples)
        return found, False, f"no statistics, fewer rows than DEFAULT_NUM_DISTINCT: {_n(found)}"
    return DEFAULT_NUM_DISTINCT, True, f"no statistics: DEFAULT_NUM_DISTINCT {DEFAULT_NUM_DISTINCT:g}"


# ---- values ------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Value:
    key: object
    """What comparisons use (an int, a Decimal, bytes...)."""
    scalar: float | None
    """convert_to_scalar's number for it (None: PostgreSQL cannot convert it either)."""
    text: str
    type_name: str


def _float4(x: float) -> float:
    return struct.unpack("f", struct.pack("f", x))[0]


def _time_usecs(text: str, type_name: str) -> int:
    """Microseconds since 2000-01-01 (UTC for timestamptz), from the ISO text PostgreSQL prints."""
    text = text.strip()
    if len(text) == 10 and text[4] == "-":  # a date, whatever the column (a constant may be a timestamp)
        day = _dt.date.fromisoformat(text)
        return (day.toordinal() - _EPOCH) * _USECS_PER_DAY
    zone = _ZONE.search(text)  # PostgreSQL writes +00 or +05:30; Python 3.11 wants +00:00
    if zone:
        text = text[:zone.start()] + zone.group(1) + zone.group(2) + ":" + (zone.group(3) or "00") \
            + (":" + zone.group(4) if zone.group(4) else "")
    moment = _dt.datetime.fromisoformat(text)
    offset = moment.utcoffset() if moment.tzinfo else None
    naive = moment.replace(tzinfo=None)
    days = naive.date().toordinal() - _EPOCH
    usecs = days * _USECS_PER_DAY + ((naive.hour * 60 + naive.minute) * 60 + naive.second) * 1_000_000 \
        + naive.microsecond
    if offset is not None:
        usecs -= int(offset.total_seconds() * 1_000_000)
    return usecs


def read_value(text: str, type_name: str, const_type: str | None = None) -> Value:
    """A value of the column's type from its text (ValueError when planview cannot read it)."""
    if type_name in NUMBER_TYPES:
        if type_name in ("int2", "int4", "int8", "oid") and (const_type in (None, "int", "bigint", "smallint")):
            number = int(text)
            return Value(number, float(number), text, type_name)
        if type_name == "numeric":
            exact = Decimal(text)
            if not exact.is_finite():
                raise ValueError("a numeric NaN or infinity")
            return Value(exact, float(text), text, type_name)
        number = float(text)
        if type_name == "float4" and const_type in (None, "float"):
            number = _float4(number)
        if math.isnan(number):
            raise ValueError("a NaN")
        return Value(number, number, text, type_name)
    if type_name == "bool":
        lowered = text.strip().lower()
        if lowered not in ("t", "true", "f", "false"):
            raise ValueError("a boolean that is neither true nor false")
        return Value(lowered in ("t", "true"), None, text, type_name)
    if type_name in STRING_TYPES:
        data = text.encode("utf-8")
        key = data.rstrip(b" ") if type_name == "bpchar" else data
        return Value(key, None, text, type_name)
    if type_name in TIME_TYPES:
        if text.strip().lower() in ("infinity", "-infinity"):
            raise ValueError("an infinite date or time")
        usecs = _time_usecs(text, type_name)
        return Value(usecs, float(usecs), text, type_name)
    raise ValueError(f"values of type {type_name} are not compared by planview")


def _compare(a: Value, op: str, b: Value) -> bool:
    x, y = a.key, b.key
    if op == "=":
        return x == y
    if op == "<>":
        return x != y
    if op == "<":
        return x < y
    if op == "<=":
        return x <= y
    if op == ">":
        return x > y
    return x >= y


def _signed(byte: int) -> int:
    """A byte as C's ``char`` holds it on the usual platforms (signed)."""
    return byte - 256 if byte > 127 else byte


def convert_string_to_scalar(value: bytes, lobound: bytes, hibound: bytes) -> tuple[float, float, float]:
    """selfuncs.c's convert_string_to_scalar for C-collated strings: find the range of
    character codes in use, widen it to whole letter and digit ranges, strip the common prefix,
    and read up to 12 characters as digits of a number in that base.

    The manual's example (the bucket FRAAAA..IBAAAA holding IAAAAA):

    >>> v, lo, hi = convert_string_to_scalar(b"IAAAAA", b"FRAAAA", b"IBAAAA")
    >>> round((v - lo) / (hi - lo), 5)
    0.98387
    """
    rangelo = rangehi = hibound[0] if hibound else 0
    for text in (lobound, hibound):
        for byte in text:
            ch = _signed(byte)
            rangelo = min(rangelo, ch)
            rangehi = max(rangehi, ch)
    if rangelo <= ord("Z") and rangehi >= ord("A"):
        rangelo, rangehi = min(rangelo, ord("A")), max(rangehi, ord("Z"))
    if rangelo <= ord("z") and rangehi >= ord("a"):
        rangelo, rangehi = min(rangelo, ord("a")), max(rangehi, ord("z"))
    if rangelo <= ord("9") and rangehi >= ord("0"):
        rangelo, rangehi = min(rangelo, ord("0")), max(rangehi, ord("9"))
    if rangehi - rangelo < 9:
        rangelo, rangehi = ord(" "), 127
    prefix = 0
    while prefix < len(lobound):
        if prefix >= len(hibound) or prefix >= len(value) or lobound[prefix] != hibound[prefix] \
                or lobound[prefix] != value[prefix]:
            break
        prefix += 1
    return tuple(_one_string(text[prefix:], rangelo, rangehi) for text in (value, lobound, hibound))


def _one_string(text: bytes, rangelo: int, rangehi: int) -> float:
    if not text:
        return 0.0
    base = rangehi - rangelo + 1
    num, denom = 0.0, float(base)
    for byte in text[:12]:
        ch = byte  # convert_one_string_to_scalar reads unsigned char
        if ch < rangelo:
            ch = rangelo - 1
        elif ch > rangehi:
            ch = rangehi + 1
        num += (ch - rangelo) / denom
        denom *= base
    return num


def _scalars(const: Value, low: Value, high: Value, column: ColumnStats) -> tuple[float, float, float] | None:
    """convert_to_scalar: the constant and the bucket's bounds on one numeric scale, or None."""
    if column.type_name in STRING_TYPES:
        return convert_string_to_scalar(const.text.encode("utf-8"), low.text.encode("utf-8"),
                                        high.text.encode("utf-8"))
    if const.scalar is None or low.scalar is None or high.scalar is None:
        return None
    return const.scalar, low.scalar, high.scalar


# ---- one clause --------------------------------------------------------------------------------


@dataclass
class Restriction:
    """One clause of the form column op constant (or IS [NOT] NULL), as planview read it."""

    text: str
    column: str
    op: str
    """``=``, ``<>``, ``<``, ``<=``, ``>``, ``>=``, ``in`` (= ANY), ``not_in`` (<> ALL), ``is_null``,
    ``is_not_null``, ``bool_true`` (a boolean column alone) or ``bool_false`` (NOT it), with the
    column on the left."""
    constant: str | None = None
    const_type: str | None = None
    """The constant's cast as printed (sqlglot's name for it: ``name``, ``date``, ``float``...)."""
    column_cast: str | None = None
    """A cast printed on the column (``::text`` on a varchar column is a relabelling)."""
    elements: list[str | None] | None = None
    """The constants of ``= ANY`` (``in``) and ``<> ALL`` (``not_in``); None is a NULL."""


@dataclass
class Selectivity:
    value: float
    steps: list[str]
    approximate: bool = False
    default: bool = False


def _cross_zone(r: Restriction, column: ColumnStats | None) -> bool:
    """A date or timestamp compared with a timestamptz (or the other way round) is converted in
    the session's time zone, which planview does not know: the result is approximate."""
    if column is None or column.type_name not in TIME_TYPES or r.const_type not in TIME_TYPES:
        return False
    return (column.type_name == "timestamptz") != (r.const_type == "timestamptz")


def _shown_value(column: ColumnStats, text: str) -> str:
    return "(a value withheld)" if column.secret else shown(text)


def _mcv(column: ColumnStats) -> tuple[list[str], list[float]]:
    values = column.most_common_vals or []
    freqs = column.most_common_freqs or []
    return values, freqs[:len(values)] if values else list(freqs)


def eq_selectivity(r: Restriction, column: ColumnStats | None, tuples: float) -> Selectivity:
    """var_eq_const (and ``<>`` as its negation)."""
    negate = r.op == "<>"
    nullfrac = (column.null_frac or 0.0) if column is not None and column.analyzed else 0.0
    steps: list[str] = []
    approximate = _cross_zone(r, column)
    if column is not None and column.unique_index and tuples >= 1.0:
        selec = 1.0 / tuples
        steps.append(f"{r.text}: the unique index {printable(column.unique_index, 63)} allows one row, "
                     f"1 / {_n(tuples)} = {_g(selec)}.")
    elif column is not None and column.analyzed:
        values, freqs = _mcv(column)
        try:
            const = read_value(r.constant or "", column.type_name, r.const_type)
            match = next((i for i, v in enumerate(values)
                          if _compare(read_value(v, column.type_name), "=", const)), None)
        except (ValueError, InvalidOperation) as exc:
            raise NotDerivable(f"{printable(r.text)}: {exc}") from None
        if match is not None:
            selec = freqs[match]
            steps.append(f"{r.text}: {_shown_value(column, r.constant or '')} is most-common value "
                         f"{match + 1} of {len(values)}, with frequency {_g(selec)}.")
        else:
            sumcommon = 0.0
            for f in freqs:
                sumcommon += f
            selec = clamp_probability(1.0 - sumcommon - nullfrac)
            distinct, is_default, how = distinct_values(column, tuples)
            other = distinct - len(freqs)
            said = (f"{r.text}: {_shown_value(column, r.constant or '')} is not among the {len(values)} "
                    f"most-common values, which hold {_g(sumcommon)} of the rows; nulls hold {_g(nullfrac)}. "
                    f"The rest, {_g(selec)}")
            if other > 1:
                selec /= other
                said += (f", is shared by the other {_n(other)} distinct values ({how}, less "
                         f"{len(freqs)} listed): {_g(selec)} each.")
            else:
                said += ", is not divided: fewer than two other distinct values are known."
            steps.append(said)
            if freqs and selec > freqs[-1]:
                selec = freqs[-1]
                steps.append(f"That is more than the least common listed value's {_g(freqs[-1])}, "
                             "so the planner takes that instead.")
    else:
        distinct, is_default, how = distinct_values(column, tuples)
        selec = 1.0 / distinct
        steps.append(f"{r.text}: the column has no statistics; the planner assumes every one of its "
                     f"distinct values is as common ({how}): 1 / {_n(distinct)} = {_g(selec)}.")
    if negate:
        before = selec
        selec = 1.0 - selec - nullfrac
        steps.append(f"For <> the planner takes the rest: 1 - {_g(before)} - {_g(nullfrac)} (nulls) = {_g(selec)}.")
    return Selectivity(clamp_probability(selec), steps, approximate)


def null_selectivity(r: Restriction, column: ColumnStats | None) -> Selectivity:
    """nulltestsel."""
    if column is not None and column.analyzed:
        nullfrac = column.null_frac or 0.0
        selec = nullfrac if r.op == "is_null" else 1.0 - nullfrac
        said = f"{r.text}: null_frac is {_g(nullfrac)}" + ("." if r.op == "is_null" else f", so 1 - {_g(nullfrac)} = {_g(selec)}.")
        return Selectivity(clamp_probability(selec), [said])
    name = "DEFAULT_UNK_SEL" if r.op == "is_null" else "DEFAULT_NOT_UNK_SEL"
    selec = DEFAULT_UNK_SEL if r.op == "is_null" else DEFAULT_NOT_UNK_SEL
    return Selectivity(selec, [f"{r.text}: the column has no statistics, so the planner's default "
                               f"{name} = {_g(selec)}."], default=True)


def ineq_selectivity(r: Restriction, column: ColumnStats | None, tuples: float, *,
                     version: int = 160000) -> Selectivity:
    """scalarineqsel: the most-common values that satisfy the clause, plus the histogram's share
    of the rows outside them."""
    if column is None or not column.analyzed:
        return Selectivity(DEFAULT_INEQ_SEL, [f"{r.text}: the column has no statistics, so the planner's "
                                              f"default DEFAULT_INEQ_SEL = 1/3."], default=True)
    isgt, iseq = r.op in (">", ">="), r.op in ("<=", ">=")
    approximate = (column.type_name in STRING_TYPES and not column.collation_is_c) or _cross_zone(r, column)
    if column.type_name == "bpchar":
        approximate = True
    try:
        const = read_value(r.constant or "", column.type_name, r.const_type)
        values, freqs = _mcv(column)
        mcv_selec, sumcommon = 0.0, 0.0
        satisfied = 0
        for v, f in zip(values, freqs):
            if _compare(read_value(v, column.type_name), r.op, const):
                mcv_selec += f
                satisfied += 1
            sumcommon += f
        bounds = [read_value(b, column.type_name) for b in column.histogram_bounds or []]
        actual = {}
        if column.leading_btree:
            if column.actual_min is not None:
                actual[0] = read_value(column.actual_min, column.type_name)
            if column.actual_max is not None:
                actual[1] = read_value(column.actual_max, column.type_name)
    except (ValueError, InvalidOperation) as exc:
        raise NotDerivable(f"{printable(r.text)}: {exc}") from None
    nullfrac = column.null_frac or 0.0
    steps = []
    if values:
        steps.append(f"{r.text}: {satisfied} of the {len(values)} most-common values satisfy it, "
                     f"holding {_g(mcv_selec)} of the rows (all of them hold {_g(sumcommon)}).")
    hist, hist_steps, hist_approx = histogram_selectivity(r, column, const, bounds, actual, tuples,
                                                          isgt=isgt, iseq=iseq, version=version)
    steps.extend(hist_steps)
    selec = 1.0 - nullfrac - sumcommon
    rest = selec
    if hist >= 0.0:
        selec *= hist
        combine = f"{_g(mcv_selec)} + {_g(hist)} x {_g(rest)}"
    else:
        selec *= 0.5
        combine = f"{_g(mcv_selec)} + 0.5 x {_g(rest)}"
        if rest > 1e-6:
            steps.append(f"{r.text}: no histogram, so the planner assumes half of the {_g(rest)} of the rows "
                         "outside the most-common values and nulls satisfy it.")
        else:
            steps.append(f"{r.text}: the most-common values and nulls hold all the rows (to rounding), "
                         "so there is no histogram.")
    selec += mcv_selec
    selec = clamp_probability(selec)
    steps.append(f"{r.text}: the histogram covers 1 - {_g(nullfrac)} (nulls) - {_g(sumcommon)} (most-common "
                 f"values) = {_g(rest)} of the rows; selectivity {combine} = {_g(selec)}.")
    return Selectivity(selec, steps, approximate or hist_approx)


def histogram_selectivity(r: Restriction, column: ColumnStats, const: Value, bounds: list[Value],
                          actual: dict, tuples: float, *, isgt: bool, iseq: bool,
                          version: int = 160000) -> tuple[float, list[str], bool]:
    """ineq_histogram_selectivity: the share of the histogram's rows that satisfy the clause
    (-1 when there is no histogram)."""
    if len(bounds) < 2:
        return -1.0, [], False
    bounds = list(bounds)
    n = len(bounds)
    have_end = False
    replaced = []

    def use_actual(slot: int, which: int) -> bool:
        if which in actual:
            if bounds[slot].key != actual[which].key:
                replaced.append((slot, bounds[slot], actual[which]))
            bounds[slot] = actual[which]
            return True
        return False

    if n == 2 and column.leading_btree and 0 in actual and 1 in actual:
        have_end = use_actual(0, 0) and use_actual(1, 1)
    lo, hi = 0, n
    probe_op = "<=" if iseq else "<"
    if isgt:
        probe_op = ">=" if iseq else ">"
    while lo < hi:
        probe = (lo + hi) // 2
        if probe == 0 and n > 2 and column.leading_btree:
            have_end = use_actual(0, 0)
        elif probe == n - 1 and n > 2 and column.leading_btree:
            have_end = use_actual(probe, 1)
        below = _compare(bounds[probe], probe_op, const)
        if isgt:
            below = not below
        if below:
            lo = probe + 1
        else:
            hi = probe
    steps = []
    approximate = False
    buckets = n - 1
    for slot, old, new in replaced:
        steps.append(f"The histogram's {'first' if slot == 0 else 'last'} bound "
                     f"{_shown_value(column, old.text)} is replaced by the column's current "
                     f"{'smallest' if slot == 0 else 'largest'} value {_shown_value(column, new.text)}, "
                     f"read from the index {printable(column.leading_btree or '', 63)}.")
    if lo <= 0:
        histfrac = 0.0
        steps.append(f"The constant lies below the histogram's {buckets} buckets.")
    elif lo >= n:
        histfrac = 1.0
        steps.append(f"The constant lies above the histogram's {buckets} buckets.")
    else:
        i = lo
        eq_selec = 0.0
        corrected = version >= EQ_CORRECTION_FROM
        if corrected and (i == 1 or isgt == iseq):
            distinct, _, how = distinct_values(column, tuples)
            other = distinct - len(column.most_common_freqs or [])
            if other > 1:
                eq_selec = 1.0 / other
        low, high = bounds[i - 1], bounds[i]
        scaled = _scalars(const, low, high, column)
        if scaled is None:
            binfrac = 0.5
            approximate = True
            how_far = "planview cannot place it inside, so half"
        else:
            val, lowv, highv = scaled
            if highv <= lowv:
                binfrac = 0.5
            elif val <= lowv:
                binfrac = 0.0
            elif val >= highv:
                binfrac = 1.0
            else:
                binfrac = (val - lowv) / (highv - lowv)
                if math.isnan(binfrac) or binfrac < 0.0 or binfrac > 1.0:
                    binfrac = 0.5
            how_far = f"{_g(binfrac)} of the way through it"
            if column.type_name in STRING_TYPES:
                how_far += " (reading the characters as digits, as the planner does)"
        histfrac = ((i - 1) + binfrac) / buckets
        said = (f"The constant falls in bucket {i} of {buckets} ({_shown_value(column, low.text)} to "
                f"{_shown_value(column, high.text)}), {how_far}: ({i - 1} + {_g(binfrac)}) / {buckets} = "
                f"{_g(histfrac)} of the histogram lies at or below it.")
        if corrected and i == 1:
            histfrac += eq_selec * (1.0 - binfrac)
            if eq_selec:
                said += f" In the first bucket the constant's own share {_g(eq_selec)} is added back in part: {_g(histfrac)}."
        if corrected and isgt == iseq:
            histfrac -= eq_selec
            if eq_selec:
                said += f" For {r.op} its own share, 1 / {_n(1 / eq_selec)} other distinct values = {_g(eq_selec)}, comes off: {_g(histfrac)}."
        steps.append(said)
    selec = 1.0 - histfrac if isgt else histfrac
    if isgt:
        steps.append(f"For {r.op} the planner takes the rest: 1 - {_g(histfrac)} = {_g(selec)}.")
    if have_end:
        selec = clamp_probability(selec)
    else:
        cutoff = 0.01 / buckets
        if selec < cutoff or selec > 1.0 - cutoff:
            kept = cutoff if selec < cutoff else 1.0 - cutoff
            steps.append(f"Without the current extremes from an index the planner keeps it a hundredth of "
                         f"a bucket off 0 and 1: {_g(kept)}.")
            selec = kept
    return selec, steps, approximate


def bool_selectivity(r: Restriction, column: ColumnStats | None, tuples: float) -> Selectivity:
    """A boolean column alone is ``column = true`` (boolvarsel, 0.5 without statistics);
    ``NOT column`` is 1 minus that (clause_selectivity_ext), nulls included."""
    if column is not None and column.analyzed:
        found = eq_selectivity(Restriction(r.text, r.column, "=", "t"), column, tuples)
        value, steps = found.value, list(found.steps)
    else:
        value, steps = 0.5, [f"{r.text}: the column has no statistics, so the planner takes half the rows."]
    if r.op == "bool_false":
        steps.append(f"NOT takes the rest, nulls included: 1 - {_g(value)} = {_g(1.0 - value)}.")
        value = 1.0 - value
    return Selectivity(clamp_probability(value), steps)


def clause_selectivity(r: Restriction, column: ColumnStats | None, tuples: float, *,
                       version: int = 160000) -> Selectivity:
    if r.op in ("is_null", "is_not_null"):
        return null_selectivity(r, column)
    if r.op in ("=", "<>"):
        return eq_selectivity(r, column, tuples)
    if r.op in ("in", "not_in"):
        return array_selectivity(r, column, tuples)
    if r.op in ("bool_true", "bool_false"):
        return bool_selectivity(r, column, tuples)
    return ineq_selectivity(r, column, tuples, version=version)


def combine(restrictions: list[Restriction], selectivities: list[Selectivity],
            columns: dict[str, ColumnStats]) -> tuple[float, list[str]]:
    """clauselist_selectivity_ext: independent clauses multiply; a lower and an upper bound on
    the same column are one range, ``hi + lo - 1`` plus the null share."""
    if len(selectivities) == 1:
        return selectivities[0].value, []
    s1 = 1.0
    product: list[str] = []
    ranges: list[dict] = []  # new columns go in front, as addRangeClause links them
    for r, s in zip(restrictions, selectivities):
        if r.op in ("<", "<=", ">", ">="):
            is_lo = r.op in (">", ">=")
            entry = next((e for e in ranges if e["column"] == r.column), None)
            if entry is None:
                entry = {"column": r.column, "lo": None, "hi": None, "lo_default": False, "hi_default": False,
                         "texts": []}
                ranges.insert(0, entry)
            side = "lo" if is_lo else "hi"
            if entry[side] is None or s.value < entry[side]:
                entry[side] = s.value
                entry[side + "_default"] = s.default
            entry["texts"].append(r.text)
            continue
        s1 *= s.value
        product.append(_g(s.value))
    steps = []
    for entry in ranges:
        if entry["lo"] is not None and entry["hi"] is not None:
            if entry["lo"] == DEFAULT_INEQ_SEL or entry["hi"] == DEFAULT_INEQ_SEL:
                s2 = DEFAULT_RANGE_INEQ_SEL
                steps.append(f"{' AND '.join(entry['texts'])} is one range; a side was the default guess, so "
                             f"the range gets DEFAULT_RANGE_INEQ_SEL = {_g(s2)}.")
            else:
                column = columns.get(entry["column"])
                nulls = null_selectivity(Restriction("", entry["column"], "is_null"), column).value
                s2 = entry["hi"] + entry["lo"] - 1.0 + nulls
                said = (f"{' AND '.join(entry['texts'])} is one range, not two independent clauses: "
                        f"{_g(entry['hi'])} + {_g(entry['lo'])} - 1 + {_g(nulls)} (nulls, excluded twice) = {_g(s2)}")
                if s2 <= 0.0:
                    s2 = DEFAULT_RANGE_INEQ_SEL if s2 < -0.01 else 1.0e-10
                    said += f", below zero, so {_g(s2)}"
                steps.append(said + ".")
            s1 *= s2
            product.append(_g(s2))
        else:
            value = entry["lo"] if entry["lo"] is not None else entry["hi"]
            s1 *= value
            product.append(_g(value))
    if len(product) > 1:
        steps.append("The clauses are taken as independent, so their selectivities multiply: "
                     f"{' x '.join(product)} = {_g(s1)}.")
    return s1, steps


def derive_restrictions(restrictions: list[Restriction], columns: dict[str, ColumnStats], *,
                        reltuples: float, relpages: int, current_pages: int, version: int = 160000,
                        has_subclass: bool = False, printed: float | None = None,
                        parallel_divisor: float | None = None, extended=()) -> dict:
    """The estimate for a scan with these ANDed clauses, worked from the statistics.

    Returns ``{"steps", "selectivity", "rows", "printed", "equal", "approximate"}``: ``rows`` as
    the planner rounds it, ``equal`` when it is the printed estimate."""
    tuples, steps = relation_tuples(reltuples, relpages, current_pages, version=version,
                                    has_subclass=has_subclass)
    approximate = False
    for stat in extended:
        kinds = set(stat.kinds) & {"f", "m"}  # dependencies and most-common values combine clauses
        covered = {r.column for r in restrictions} & set(stat.columns)
        if kinds and len(covered) >= 2:
            approximate = True
            steps.append(f"Extended statistics {printable(stat.name, 63)} cover "
                         f"{', '.join(sorted(printable(c, 63) for c in covered))}: the planner may combine "
                         "those clauses from them first; planview works them out as independent.")
    selectivities = []
    for r in restrictions:
        s = clause_selectivity(r, columns.get(r.column), tuples, version=version)
        selectivities.append(s)
        steps.extend(s.steps)
        approximate = approximate or s.approximate
    if restrictions:
        selectivity, combined = combine(restrictions, selectivities, columns)
        steps.extend(combined)
    else:
        selectivity = 1.0
        steps.append("No clause restricts the rows: selectivity 1.")
    raw = tuples * selectivity
    rows = clamp_row_est(raw)
    steps.append(f"Rows: {_n(tuples)} x {_g(selectivity)} = {raw:,.2f}, which the planner rounds to {_n(rows)}"
                 + (" (at least 1)." if raw < 1 else "."))
    if parallel_divisor:
        total = rows
        rows = clamp_row_est(rows / parallel_divisor)
        steps.append(f"Each of the parallel processes expects its share: {_n(total)} / {parallel_divisor:g} "
                     f"= {_n(rows)}.")
    equal = printed is not None and rows == float(printed)
    if printed is not None:
        steps.append(f"The plan printed {_n(printed)}: " + ("the same." if equal else "not the same."))
    return {"steps": steps, "selectivity": selectivity, "rows": rows, "printed": printed,
            "equal": equal, "approximate": approximate}


def eqjoin_selectivity(null_frac1: float, distinct1: float, null_frac2: float, distinct2: float) -> float:
    """eqjoinsel_inner without most-common values on both sides (the manual's join example):
    ``(1 - null_frac1) x (1 - null_frac2) x min(1/num_distinct1, 1/num_distinct2)``."""
    selec = (1.0 - null_frac1) * (1.0 - null_frac2)
    return selec / distinct1 if distinct1 > distinct2 else selec / distinct2


def join_rows(outer_rows: float, inner_rows: float, selectivity: float) -> float:
    """The join's rows: the inputs' Cartesian product times the join selectivity, clamped."""
    return clamp_row_est(outer_rows * inner_rows * selectivity)


# ---- reading a node's clauses -----------------------------------------------------------------


MAX_BITMAP_DEPTH = 64


def table_node(nodes, node):
    """The node that names the table `node` reads: itself, or for an index scan feeding a bitmap
    (which names only its index) the heap scan it feeds, up through the bitmaps combining it."""
    current, steps = node, 0
    while not current.relation and current.parent is not None and steps < MAX_BITMAP_DEPTH:
        current, steps = nodes[current.parent], steps + 1
        if current.relation and current.operator not in RESTRICTION_SCANS:
            return None
    return current if current.relation else None


def restrictions_of(node, table=None) -> list[Restriction]:
    """The node's printed clauses as column-op-constant restrictions, or NotDerivable. `table`
    is the node naming the table (`table_node`), when `node` names only an index."""
    kinds = RESTRICTION_SCANS.get(node.operator)
    if kinds is None:
        raise NotDerivable("not a scan whose estimate is the table's restriction estimate")
    table = table if table is not None else node
    if not table.relation:
        raise NotDerivable("the scan names no table")
    found: list[Restriction] = []
    for condition in node.conditions:
        if condition.kind not in kinds:
            raise NotDerivable(f"its {printable(condition.key or condition.kind, 40)} is not a restriction "
                               "planview works out")
        for clause in parse_condition(condition.text, condition.kind, DIALECT):
            found.append(_restriction(clause, table))
    return found


def _restriction(clause, node) -> Restriction:
    text = printable(clause.text)
    if clause.parse_error:
        raise NotDerivable(f"{text} could not be read")
    if clause.has_parameter or clause.has_subplan:
        raise NotDerivable(f"{text} compares with a value known only when the plan runs")
    if len(clause.columns) != 1 or not clause.bare:
        raise NotDerivable(f"{text} is not one bare column against a constant")
    qualifier = clause.columns[0].qualifier
    if qualifier is not None and qualifier not in {node.alias, node.relation}:
        raise NotDerivable(f"{text} names another table")
    try:
        rendered = render_clause(clause.text)
    except UnsafeClause as exc:
        raise NotDerivable(f"{text}: {exc}") from None
    column = clause.columns[0].name
    wrapper = set(clause.wrappers)
    if clause.op_class in ("is_null", "is_not_null"):
        return Restriction(text, column, clause.op_class)
    if clause.op_class == "boolean_column" and not wrapper:  # "flag" or "NOT flag"
        negations = rendered.sql.count("(NOT ")
        if negations > 1 or (negations and not rendered.sql.startswith("(NOT ")):
            raise NotDerivable(f"{text} is not a plain boolean column")
        return Restriction(text, column, "bool_false" if negations else "bool_true")
    if len(wrapper) > 1:
        raise NotDerivable(f"{text} wraps its column in more than one cast")
    if _QUANTIFIED.search(rendered.sql):  # x op ANY/ALL (array), however the classifier read it
        op = "in" if _ANY in rendered.sql else "not_in" if _ALL in rendered.sql else None
        if op is None or len(rendered.literals) != 1 or not clause.column_left:
            raise NotDerivable(f"{text} is not a comparison planview works out")
        try:
            elements = array_elements(rendered.literals[0])
        except ValueError as exc:
            raise NotDerivable(f"{text}: {exc}") from None
        return Restriction(text, column, op, None, None, next(iter(wrapper), None), elements)
    if clause.op_class not in ("equality", "inequality", "open_range") or clause.operator not in _OPS:
        raise NotDerivable(f"{text} is not a comparison planview works out")
    if len(rendered.literals) != 1:
        raise NotDerivable(f"{text} does not compare with one constant")
    op = _OPS[clause.operator]
    if not clause.column_left:
        op = _FLIP[op]
    cast = next(iter(clause.constant_types), None)
    return Restriction(text, column, op, rendered.literals[0], cast, next(iter(wrapper), None))


_ANY = "OPERATOR(pg_catalog.=) ANY ("
_ALL = "OPERATOR(pg_catalog.<>) ALL ("
_QUANTIFIED = re.compile(r"OPERATOR\(pg_catalog\.[^)]*\) (?:ANY|ALL) \(")
MAX_ELEMENTS = 10_000


def array_elements(text: str) -> list[str | None]:
    """A one-dimensional array constant as PostgreSQL prints it (``{a,"b c",NULL}``).

    >>> array_elements('{open,"a, b",NULL, x }')
    ['open', 'a, b', None, 'x']
    """
    body = text.strip()
    if not (body.startswith("{") and body.endswith("}")):
        raise ValueError("the list is not an array constant")
    body = body[1:-1]
    if not body.strip():
        return []
    out: list[str | None] = []
    i, n = 0, len(body)
    while i <= n:
        while i < n and body[i] == " ":
            i += 1
        if i < n and body[i] == "{":
            raise ValueError("the list has more than one dimension")
        if i < n and body[i] == '"':
            i += 1
            piece = []
            while i < n and body[i] != '"':
                if body[i] == "\\" and i + 1 < n:
                    i += 1
                piece.append(body[i])
                i += 1
            if i >= n:
                raise ValueError("the list has an unclosed quote")
            i += 1
            value: str | None = "".join(piece)
            while i < n and body[i] == " ":
                i += 1
        else:
            start = i
            while i < n and body[i] != ",":
                i += 1
            raw = body[start:i].strip()
            value = None if raw.upper() == "NULL" else raw
        out.append(value)
        if len(out) > MAX_ELEMENTS:
            raise ValueError(f"the list holds more than {MAX_ELEMENTS:,} values")
        if i < n and body[i] != ",":
            raise ValueError("the list is not a plain array constant")
        i += 1
    return out


def array_selectivity(r: Restriction, column: ColumnStats | None, tuples: float) -> Selectivity:
    """scalararraysel for ``column = ANY (constants)`` and ``column <> ALL (constants)``: each
    value's selectivity as for one constant; for ``= ANY`` the values are taken as distinct, so
    their shares add up (while the sum stays within 0..1, else 1 - product of misses), for
    ``<> ALL`` the shares multiply (or add up as ``1 + sum(s - 1)`` while that stays within 0..1)."""
    use_or = r.op == "in"
    s1 = s1disjoint = 0.0 if use_or else 1.0
    steps: list[str] = []
    approximate = False
    shown_steps = 3
    for k, element in enumerate(r.elements or []):
        if element is None:
            s2 = 0.0
            said = [f"{r.text}: a NULL in the list matches nothing."]
        else:
            one = Restriction(f"value {k + 1}", r.column, "=" if use_or else "<>", element)
            found = eq_selectivity(one, column, tuples)
            s2, said, approximate = found.value, found.steps, approximate or found.approximate
        if use_or:
            s1 = s1 + s2 - s1 * s2
            s1disjoint += s2
        else:
            s1 = s1 * s2
            s1disjoint += s2 - 1.0
        if k < shown_steps:
            steps.extend(said)
    count = len(r.elements or [])
    if count > shown_steps:
        steps.append(f"... and so for the other {count - shown_steps} values of the list.")
    if 0.0 <= s1disjoint <= 1.0:
        steps.append(f"{r.text}: the {count} values are taken as distinct, so their shares "
                     f"{'add up' if use_or else 'of the rest combine'}: {_g(s1disjoint)}.")
        s1 = s1disjoint
    else:
        steps.append(f"{r.text}: adding the shares would leave 0..1, so they combine as independent: {_g(s1)}.")
    return Selectivity(clamp_probability(s1), steps, approximate)


def _check_types(restrictions: list[Restriction], columns: dict[str, ColumnStats]) -> None:
    for r in restrictions:
        column = columns.get(r.column)
        if column is None:
            raise NotDerivable(f"the table has no column {shown(r.column)}")
        if r.column_cast and r.column_cast not in RELABELS.get(column.type_name, ()):
            raise NotDerivable(f"{r.text} converts its column ({printable(column.type_shown, 40)}), so the "
                               "planner has no statistics of what it compares")
        if r.op in ("is_null", "is_not_null"):
            continue
        if (r.op in ("bool_true", "bool_false")) != (column.type_name == "bool") and \
                (r.op in ("bool_true", "bool_false") or r.op not in ("=", "<>", "in", "not_in")):
            raise NotDerivable(f"{r.text}: a boolean test on a {printable(column.type_shown, 40)} column, "
                               "or a comparison planview does not work out on a boolean")
        if column.type_name == "bool" or r.op in ("bool_true", "bool_false"):
            continue
        if column.type_name not in NUMBER_TYPES | STRING_TYPES | TIME_TYPES:
            raise NotDerivable(f"{r.text}: values of type {printable(column.type_shown, 40)} are not "
                               "compared by planview")


# ---- on a live connection ----------------------------------------------------------------------


def derive_plan(plan, conn, *, budget: Budget, skipped: dict | None = None) -> dict[int, dict]:
    """Work again the estimate of every simple scan in `plan` (PostgreSQL) from the statistics
    on `conn`, read-only, and attach each result to its node as `derivation`.

    A scan qualifies when it reads one table (not parameterised by an outer row) and every
    clause it prints is a bare column against a constant. `skipped`, when given, receives the
    reason for each scan that did not (node id -> sentence). Returns node id -> derivation."""
    if getattr(plan, "engine", None) != "postgresql":
        raise ProbeError("re-deriving estimates needs a PostgreSQL plan")
    skipped = skipped if skipped is not None else {}
    wanted: dict[tuple, dict] = {}
    for node in plan.nodes:
        if node.operator not in RESTRICTION_SCANS:
            continue
        try:
            if node.est_rows is None:
                raise NotDerivable("the plan printed no estimate")
            table = table_node(plan.nodes, node)
            if table is None:
                raise NotDerivable("the scan names no table")
            restrictions = restrictions_of(node, table)
        except NotDerivable as exc:
            skipped[node.id] = str(exc)
            continue
        key = (table.schema, table.relation)
        entry = wanted.setdefault(key, {"node": table, "columns": set(), "endpoints": set(), "nodes": []})
        entry["columns"].update(r.column for r in restrictions)
        entry["endpoints"].update(r.column for r in restrictions if r.op in ("<", "<=", ">", ">="))
        entry["nodes"].append((node, restrictions))
    results: dict[int, dict] = {}
    scans = scans_by_table(plan)
    for (schema, relation), entry in wanted.items():
        table = f"{schema}.{relation}" if schema else relation
        try:
            stats = read_table_stats(conn, entry["node"], sorted(entry["columns"]), budget=budget,
                                     endpoints=sorted(entry["endpoints"]), scans=scans, table=table)
        except ProbeError as exc:
            for node, _ in entry["nodes"]:
                skipped[node.id] = f"the statistics could not be read: {exc}"
            continue
        for node, restrictions in entry["nodes"]:
            try:
                derivation = derive_node(node, restrictions, stats)
            except NotDerivable as exc:
                skipped[node.id] = str(exc)
                continue
            node.derivation = derivation
            results[node.id] = derivation
    if results and hasattr(plan, "_report"):
        plan._report = None
    return results


def derive_node(node, restrictions: list[Restriction], stats: TableStats) -> dict:
    """One node's derivation from its table's statistics (pure)."""
    if stats.relkind == "p":
        raise NotDerivable("a partitioned table's estimate is the sum of its partitions'")
    _check_types(restrictions, stats.columns)
    divisor = node.parallel_divisor if node.parallel_aware else None
    derivation = derive_restrictions(
        restrictions, stats.columns, reltuples=stats.reltuples, relpages=stats.relpages,
        current_pages=stats.current_pages, version=stats.server_version, has_subclass=stats.has_subclass,
        printed=node.est_rows, parallel_divisor=divisor, extended=stats.extended)
    notes = []
    if node.index and node.index in stats.partial_indexes:
        derivation["approximate"] = True
        notes.append(f"The index {printable(node.index, 63)} has a predicate: the scan does not print the "
                     "clauses it implies, which the planner still counted, so this derivation may miss some.")
    modified = stats.modified_since_analyze
    if modified and stats.reltuples > 0 and modified >= 0.1 * stats.reltuples:
        notes.append(f"{modified:,} rows have changed since the last ANALYZE: the planner still uses the "
                     "statistics of then (refreshing them is ANALYZE, which reads a sample and takes a "
                     "SHARE UPDATE EXCLUSIVE lock; your change process decides).")
    derivation["steps"][-1:-1] = notes
    derivation["table"] = stats.label
    derivation["statistics"] = stats.as_dict()
    return derivation


# ---- numbers in sentences ---------------------------------------------------------------------


def _g(x: float) -> str:
    """A selectivity with six significant digits, as the manual writes them."""
    return f"{x:.6g}"


def _n(x: float) -> str:
    """A row count: whole numbers with separators, others with up to two decimals."""
    return f"{x:,.0f}" if float(x).is_integer() else f"{x:,.2f}"
