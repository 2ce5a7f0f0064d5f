"""One set of queries for every engine: queries/*.sql are written in DuckDB's SQL and translated
here, with sqlglot, for PostgreSQL and Spark SQL.

sqlglot translates most of the text on its own (types, casts, string formats, typed division,
window defaults for NULL order). What it cannot know is what churnlife *means* by a few DuckDB
functions, so those are rewritten here, each defined once, precisely:

* ``list_contains($codes, x)`` (a list parameter): ``x IN ($codes_0, $codes_1, ...)``, one
  bound value per item, so no engine needs array parameters;
* ``date_diff('day', a, b)``: the number of calendar days from the date of ``a`` to the date of
  ``b`` (``CAST(b AS DATE) - CAST(a AS DATE)``). Spark's three-argument DATEDIFF counts whole
  elapsed days between timestamps instead, so Spark gets ``DATEDIFF(CAST(b AS DATE), CAST(a AS
  DATE))``;
* ``to_months(k)``: an interval of ``k`` calendar months (adding it to a date moves the month and
  keeps the day, clamped to the month's last day, in all three engines);
* ``UNNEST(generate_series(lo, hi))``: one row per whole number from lo to hi inclusive
  (PostgreSQL's generate_series is already a set-returning function).

``bind`` then turns DuckDB's named ``$name`` markers into the engine's own: positional ``$1`` for
PostgreSQL (ADBC), named ``:name`` for Spark. Identifiers are never touched here: the config
validated them and the source quoted them before the text was written.

The tests compare each engine's counts with DuckDB's on the demo and on edge-case logs
(tests/test_engines_postgres.py, tests/test_engines_spark.py), so a translation is not trusted
blindly.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from typing import Any

import sqlglot
from sqlglot import exp

DIALECTS = ("duckdb", "postgres", "spark")


@dataclass(frozen=True)
class Statement:
    """SQL text in one engine's dialect and the values for its parameter markers."""

    text: str
    values: tuple[Any, ...] | dict[str, Any]
    dialect: str

    def listing(self) -> str:
        """The text, ended by ``;``, and its bound values as SQL comments (for --show-sql)."""
        if not self.values:
            return self.text + ";"
        items = (
            self.values.items()
            if isinstance(self.values, dict)
            else ((f"${i}", v) for i, v in enumerate(self.values, start=1))
        )
        lines = [f"--   {name} = {_show(value)}" for name, value in items]
        return self.text + ";\n-- bound values:\n" + "\n".join(lines)


def _show(value: Any) -> str:
    if isinstance(value, dt.date | dt.datetime):
        return f"'{value.isoformat()}'"
    if isinstance(value, str):
        return "'" + value.replace("'", "''") + "'"
    return repr(value)


def parse(sql: str) -> exp.Expression:
    """Parse churnlife's DuckDB-dialect text."""
    tree = sqlglot.parse_one(sql, read="duckdb")
    if tree is None:  # pragma: no cover - only for empty text, a programming error
        raise ValueError("empty SQL")
    return tree


def rewrite(tree: exp.Expression, params: dict[str, Any], dialect: str) -> exp.Expression:
    """Apply churnlife's own rewrites for ``dialect`` (a copy; ``tree`` is left as it is)."""
    if dialect not in DIALECTS:
        raise ValueError(f"unknown dialect {dialect!r}")
    tree = tree.copy()

    def lists(node: exp.Expression) -> exp.Expression:
        if isinstance(node, exp.ArrayContains) and isinstance(node.this, exp.Placeholder):
            return _in_list(node, params)
        return node

    def months(node: exp.Expression) -> exp.Expression:
        if isinstance(node, exp.Anonymous) and node.name.lower() == "to_months":
            (k,) = node.expressions
            if dialect == "spark":
                zero_years = exp.Literal.number(0)
                return exp.Anonymous(this="MAKE_YM_INTERVAL", expressions=[zero_years, k])
            return exp.Paren(this=exp.Mul(this=exp.Paren(this=k), expression=_interval_month()))
        return node

    def days(node: exp.Expression) -> exp.Expression:
        if isinstance(node, exp.DateDiff) and _unit(node) == "DAY":
            end = exp.cast(node.this, exp.DataType.build("DATE"))
            start = exp.cast(node.expression, exp.DataType.build("DATE"))
            if dialect == "spark":
                return exp.Anonymous(this="DATEDIFF", expressions=[end, start])
            return exp.Paren(this=exp.Sub(this=end, expression=start))
        return node

    def series(node: exp.Expression) -> exp.Expression:
        if isinstance(node, exp.Explode | exp.Unnest) and isinstance(
            node.this, exp.GenerateSeries
        ):
            bounds = [node.this.args["start"], node.this.args["end"]]
            return exp.Anonymous(this="generate_series", expressions=bounds)
        return node

    # one pass per rewrite, innermost first: transform() does not revisit a replaced subtree
    tree = tree.transform(lists)
    if dialect == "duckdb":
        return tree
    tree = tree.transform(months).transform(days)
    return tree.transform(series) if dialect == "postgres" else tree


def _unit(node: exp.DateDiff) -> str:
    unit = node.args.get("unit")
    return unit.name.upper() if unit is not None else "DAY"


def _interval_month() -> exp.Expression:
    return exp.Interval(this=exp.Literal.string("1"), unit=exp.Var(this="MONTH"))


def _in_list(node: exp.ArrayContains, params: dict[str, Any]) -> exp.Expression:
    name = node.this.name
    items = params.get(name)
    if not isinstance(items, list | tuple) or not items:
        raise RuntimeError(f"list_contains needs a non-empty list parameter ${name}")
    markers = [exp.Placeholder(this=f"{name}__{i}") for i in range(len(items))]
    return exp.Paren(this=exp.In(this=node.expression, expressions=markers))


def flat_params(params: dict[str, Any]) -> dict[str, Any]:
    """``params`` with each list value also given item by item (``codes__0``, ``codes__1``)."""
    out = dict(params)
    for name, value in params.items():
        if isinstance(value, list | tuple):
            out.update({f"{name}__{i}": v for i, v in enumerate(value)})
    return out


def placeholders(tree: exp.Expression) -> list[str]:
    """Names of the parameter markers in ``tree``, in order of first appearance."""
    seen: dict[str, None] = {}
    for node in tree.find_all(exp.Placeholder):
        seen.setdefault(node.name, None)
    return list(seen)


def bind(tree: exp.Expression, params: dict[str, Any], dialect: str) -> Statement:
    """Render ``tree`` (already rewritten for ``dialect``) with the engine's parameter markers
    and the values they take."""
    values = flat_params(params)
    names = placeholders(tree)
    missing = [n for n in names if n not in values]
    if missing:
        raise RuntimeError(f"SQL needs parameters that were not given: {sorted(missing)}")
    if dialect == "postgres":
        number = {name: i for i, name in enumerate(names, start=1)}

        def typed(n: exp.Expression) -> exp.Expression:
            # each marker says its type: PostgreSQL has no date + bigint, and infers
            # nothing from an untyped marker inside an expression
            if not isinstance(n, exp.Placeholder):
                return n
            marker = exp.Var(this=f"${number[n.name]}")
            kind = exp.DataType.build(_pg_type(values[n.name]), dialect="postgres")
            return exp.cast(marker, kind)

        marked = tree.transform(typed)
        text = marked.sql(dialect="postgres", pretty=True)
        return Statement(text, tuple(values[n] for n in names), dialect)
    if dialect == "spark":
        text = tree.sql(dialect="spark", pretty=True)
        return Statement(text, {n: values[n] for n in names}, dialect)
    marked = tree.transform(
        lambda n: exp.Var(this=f"${n.name}") if isinstance(n, exp.Placeholder) else n
    )
    return Statement(marked.sql(dialect="duckdb", pretty=True), {n: values[n] for n in names},
                     dialect)


def _pg_type(value: Any) -> str:
    if isinstance(value, bool):
        return "BOOLEAN"
    if isinstance(value, int):
        return "INTEGER" if -(2**31) <= value < 2**31 else "BIGINT"
    if isinstance(value, float):
        return "DOUBLE PRECISION"
    if isinstance(value, dt.datetime):
        return "TIMESTAMP"
    if isinstance(value, dt.date):
        return "DATE"
    return "TEXT"


def translate(sql: str, params: dict[str, Any], dialect: str) -> Statement:
    """DuckDB-dialect ``sql`` with ``$name`` markers → a Statement for ``dialect``."""
    return bind(rewrite(parse(sql), params, dialect), params, dialect)


def rename_placeholders(tree: exp.Expression, prefix: str) -> exp.Expression:
    """Every ``$name`` marker becomes ``$<prefix>name`` (a staged query keeps its own values
    when it is composed into a later query that binds different ones)."""
    return tree.transform(
        lambda n: exp.Placeholder(this=prefix + n.name) if isinstance(n, exp.Placeholder) else n
    )


def with_staged(tree: exp.Expression, staged: list[tuple[str, exp.Expression]]) -> exp.Expression:
    """``tree`` with the staged queries it needs put in front as CTEs, in staging order (a later
    stage may read an earlier one). Engines that cannot keep a result (a read-only transaction)
    run the staged queries this way, inside the query that reads them."""
    if not staged:
        return tree
    tree = tree.copy()
    ctes = [exp.CTE(this=body.copy(), alias=exp.TableAlias(this=exp.to_identifier(name)))
            for name, body in staged]
    existing = tree.args.get("with_") or tree.args.get("with")
    key = "with_" if "with_" in tree.arg_types else "with"
    if existing is not None:
        existing.set("expressions", ctes + list(existing.expressions))
    else:
        tree.set(key, exp.With(expressions=ctes))
    return tree


def referenced_tables(tree: exp.Expression) -> set[str]:
    """Unqualified names of the tables ``tree`` reads (to find the staged ones it needs)."""
    return {t.name for t in tree.find_all(exp.Table)}


class Composer:
    """Staged queries kept as text, for an engine that cannot keep a result (PostgreSQL in a
    read-only transaction): a query that reads staged names gets those stages, and the stages
    they read, in front of it as CTEs, in staging order. Each stage's parameter markers get a
    prefix of their own (``s1_as_of``), so a stage keeps its values whatever the later query
    binds."""

    def __init__(self, dialect: str) -> None:
        self.dialect = dialect
        # name -> (text with prefixed markers, its values, the stage names it reads)
        self._stages: dict[str, tuple[exp.Expression, dict[str, Any], set[str]]] = {}

    def stage(self, name: str, sql: str, params: dict[str, Any]) -> str:
        prefix = f"s{len(self._stages) + 1}_"
        tree = parse(sql)
        names = set(placeholders(tree))
        values = {prefix + n: v for n, v in params.items() if n in names}
        reads = referenced_tables(tree) & self._stages.keys()
        self._stages[name] = (rename_placeholders(tree, prefix), values, reads)
        return name

    def _needed(self, tree: exp.Expression) -> list[str]:
        needed = referenced_tables(tree) & self._stages.keys()
        frontier = set(needed)
        while frontier:
            more = set().union(*(self._stages[n][2] for n in frontier)) - needed
            needed |= more
            frontier = more
        return [n for n in self._stages if n in needed]  # staging order: reads come first

    def statement(self, sql: str, params: dict[str, Any]) -> Statement:
        tree = parse(sql)
        needed = self._needed(tree)
        values = dict(params)
        for n in needed:
            values.update(self._stages[n][1])
        tree = with_staged(tree, [(n, self._stages[n][0]) for n in needed])
        return bind(rewrite(tree, values, self.dialect), values, self.dialect)
