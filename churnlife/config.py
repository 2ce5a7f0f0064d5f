"""Read and validate a churnlife TOML config before any query runs.

Every key is documented in README.md ("Config reference"); the demo's config, demo/churnlife.toml,
is the worked example. Validation is strict: an unknown key, a wrong type or an impossible
value stops the run with a message naming the key and the fix (``UserError``).
"""

from __future__ import annotations

import datetime as dt
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from churnlife.errors import UserError, did_you_mean
from churnlife.value.settings import VALUE_KEYS, ValueSettings, parse_value_settings

TENURE_UNITS = ("days", "weeks", "months", "periods")
COHORT_KEYS = ("signup_month", "signup_quarter", "signup_year", "plan", "channel", "price_band")
EVENT_ROLES = (
    "start",
    "renewal",
    "cancel",
    "payment_failed",
    "payment_recovered",
    "price_change",
    "plan_change",
    "ignore",
)
REQUIRED_ROLES = ("start", "cancel")
COLUMN_ROLES_EVENTS = ("customer_id", "event_time", "event_kind", "plan", "price", "cancel_reason")
COLUMN_ROLES_CUSTOMERS = ("signup_date", "channel")
SOURCE_KINDS = ("duckdb", "files", "postgres", "spark")
SPARK_FILE_FORMATS = ("parquet", "orc", "csv", "json")
URL_ENV_DEFAULT = "CHURNLIFE_SOURCE_URL"
INTERVAL_KINDS = ("log-log", "plain")
INCOMPLETE_ROWS = ("stop", "drop")

# A plain SQL identifier: letters, digits, underscore; optionally schema-qualified with one dot.
_IDENT = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*(\.[A-Za-z_][A-Za-z0-9_]*)?$")


@dataclass(frozen=True)
class SourceConfig:
    kind: str
    database: Path | None
    events: str
    customers: str | None
    read_options: dict[str, Any] = field(default_factory=dict)
    # kinds postgres and spark: where the engine is (a URL in the config or, for credentials,
    # in an environment variable), and how long one query may run
    url: str | None = None
    url_env: str = URL_ENV_DEFAULT
    statement_timeout_s: int = 1800
    file_format: str | None = None  # spark: events/customers are paths in this format
    spark_conf: dict[str, str] = field(default_factory=dict)

    def resolve_url(self) -> str:
        """The engine's URL: the environment variable ``url_env`` when it is set, else ``url``."""
        import os

        value = os.environ.get(self.url_env) or self.url
        if not value:
            what = "PostgreSQL connection URL" if self.kind == "postgres" else "Spark master URL"
            raise UserError(
                f"no {what}: set the environment variable {self.url_env} (for example "
                + ("postgresql://analyst@db.example:5432/subscriptions"
                   if self.kind == "postgres" else "spark://warehouse:7077")
                + ") or [source] url in the config (without a password)."
            )
        return value


def redact_url(url: str) -> str:
    """``url`` with any password replaced by ***, for messages and the report."""
    return re.sub(r"(://[^:/@]*:)[^@]*@", r"\1***@", url)


@dataclass(frozen=True)
class Config:
    """A validated config. Paths are absolute (relative ones resolve against the config file)."""

    source: SourceConfig
    columns: dict[str, str | None]
    customer_columns_in: str  # "customers" or "events": where signup_date/channel live
    event_codes: dict[str, tuple[str, ...]]
    log_start: dt.date
    as_of: dt.date
    tenure_unit: str
    period_months: dict[str, float]
    default_period_months: float
    grace_days: int
    reactivation_gap_days: int
    cohorts: tuple[str, ...]
    price_bands: tuple[float, ...]
    retention_at: tuple[int, ...]
    confidence: float
    interval: str
    output_folder: Path
    config_path: Path | None = None
    incomplete_rows: str = "stop"  # rows without id, time or kind: "stop" the run, or "drop" them
    value: ValueSettings = field(default_factory=ValueSettings)  # [value]: how money is counted

    def summary(self) -> dict[str, Any]:
        """The run's parameters as shown in the report (no credentials, no file contents)."""
        return {
            "source": self.source.kind,
            "events table": self.source.events,
            "customers table": self.source.customers or "(none)",
            "log starts": self.log_start.isoformat(),
            "as-of date": self.as_of.isoformat(),
            "tenure unit": self.tenure_unit,
            "failed-payment grace (days)": self.grace_days,
            "gap bridged as continuation (days)": self.reactivation_gap_days,
            "rows without id, time or kind": self.incomplete_rows,
            "cohorts by": ", ".join(self.cohorts) or "(all customers together)",
            "confidence": self.confidence,
            "interval": self.interval,
        }


_SCHEMA: dict[str, tuple[str, ...]] = {
    "source": (
        "kind", "database", "events", "customers", "read_options", "url", "url_env",
        "statement_timeout_s", "file_format", "spark_conf",
    ),
    "columns": COLUMN_ROLES_EVENTS + COLUMN_ROLES_CUSTOMERS,
    "event_codes": EVENT_ROLES,
    "window": ("log_start", "as_of"),
    "tenure": ("unit", "period_months", "default_period_months"),
    "rules": ("grace_days", "reactivation_gap_days", "incomplete_rows"),
    "cohorts": ("by", "price_bands"),
    "report": ("retention_at", "confidence", "interval"),
    "output": ("folder",),
    "value": VALUE_KEYS,
}


def load_config(path: str | Path, overrides: dict[str, Any] | None = None) -> Config:
    """Read ``path`` (TOML) and validate it. ``overrides`` replace top-level tables' keys,
    e.g. ``{"output": {"folder": "out"}}``."""
    p = Path(path)
    if not p.is_file():
        raise UserError(
            f"config file not found: {p}. Give the path of a churnlife TOML file with --config "
            "(see README.md, 'Config reference'; `churnlife demo` writes an example)."
        )
    try:
        raw = tomllib.loads(p.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as err:
        raise UserError(
            f"config {p} is not valid TOML: {err}. Fix the syntax at that line."
        ) from None
    except UnicodeDecodeError:
        raise UserError(f"config {p} is not UTF-8 text. Save it as UTF-8.") from None
    for table, values in (overrides or {}).items():
        raw.setdefault(table, {}).update(values)
    return parse_config(raw, base=p.resolve().parent, config_path=p.resolve())


def _check_keys(raw: dict[str, Any]) -> None:
    for table, value in raw.items():
        if table not in _SCHEMA:
            raise UserError(
                f"unknown config table [{table}].{did_you_mean(table, tuple(_SCHEMA))} "
                f"Known tables: {', '.join(_SCHEMA)}."
            )
        if not isinstance(value, dict):
            raise UserError(
                f"config: [{table}] must be a table of keys, not a single value. Write it as a "
                f"[{table}] section with one key per line (see README.md, 'Config reference')."
            )
        for key in value:
            if key not in _SCHEMA[table]:
                raise UserError(
                    f'unknown config key "{key}" in [{table}].'
                    f"{did_you_mean(key, _SCHEMA[table])} Known keys: {', '.join(_SCHEMA[table])}."
                )


def _get(raw: dict, table: str, key: str, kind: type | tuple[type, ...], default: Any = ...) -> Any:
    value = raw.get(table, {}).get(key, default)
    if value is ...:
        raise UserError(f"config: [{table}] {key} is required. Add it (see README.md).")
    if value is None or value is default:
        return value
    kinds = kind if isinstance(kind, tuple) else (kind,)
    # TOML integers are fine where a float is wanted; booleans are never numbers here.
    if float in kinds and isinstance(value, int) and not isinstance(value, bool):
        value = float(value)
    if (isinstance(value, bool) and bool not in kinds) or not isinstance(value, kinds):
        names = " or ".join(
            f"{_TOML_WORDS[k][0]} (e.g. {_TOML_WORDS[k][1]})" if k in _TOML_WORDS else k.__name__
            for k in kinds
        )
        got = _TOML_WORDS.get(type(value), (type(value).__name__,))[0]
        raise UserError(
            f"config: [{table}] {key} must be {names}, but it is {got}: {_toml(value)}. "
            "Write it in that form (see README.md, 'Config reference')."
        )
    return value


# How TOML values are called in messages (a user writes TOML, not Python): name, example.
_TOML_WORDS: dict[type, tuple[str, str]] = {
    int: ("a whole number", "14"),
    float: ("a number", "0.95"),
    str: ("text in quotes", '"months"'),
    bool: ("true or false", "true"),
    list: ("a list in brackets", "[1, 12]"),
    dict: ("a table", "{ key = 1 }"),
    dt.date: ("a date", "2024-01-31"),
}


def _toml(value: Any) -> str:
    """A value as it is written in TOML (for messages)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return '"' + value + '"'
    return repr(value) if not isinstance(value, dt.date) else value.isoformat()


def check_identifier(name: str, what: str) -> str:
    """Refuse anything but a plain (optionally schema-qualified) SQL identifier."""
    if not isinstance(name, str) or not _IDENT.match(name):
        raise UserError(
            f"{what} {name!r} is not a plain SQL identifier (letters, digits and _, optionally "
            "schema.name). Rename it in the config; churnlife never pastes other text into SQL."
        )
    return name


def _date(raw: dict, key: str) -> dt.date:
    value = _get(raw, "window", key, (dt.date, str))
    if isinstance(value, dt.datetime):
        return value.date()
    if isinstance(value, dt.date):
        return value
    try:
        return dt.date.fromisoformat(value)
    except ValueError:
        raise UserError(
            f"config: [window] {key} = {value!r} is not a date. Write it as YYYY-MM-DD."
        ) from None


def _codes(raw: dict) -> dict[str, tuple[str, ...]]:
    table = raw.get("event_codes")
    if not table:
        raise UserError(
            "config: [event_codes] is required: map your event kinds to the roles "
            f"{', '.join(EVENT_ROLES)} (see README.md)."
        )
    codes: dict[str, tuple[str, ...]] = {}
    seen: dict[str, str] = {}
    for role in EVENT_ROLES:
        value = table.get(role, [])
        if isinstance(value, str):
            value = [value]
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            raise UserError(f"config: [event_codes] {role} must be a list of strings.")
        for code in value:
            if code in seen:
                raise UserError(
                    f'config: event code "{code}" is listed under both {seen[code]} and {role}. '
                    "Give each code one role."
                )
            seen[code] = role
        codes[role] = tuple(value)
    for role in REQUIRED_ROLES:
        if not codes[role]:
            raise UserError(
                f"config: [event_codes] {role} is empty. List the event kind(s) that mean {role}."
            )
    return codes


def _parse_source(raw: dict[str, Any], base: Path) -> SourceConfig:
    kind = _get(raw, "source", "kind", str, "duckdb")
    if kind not in SOURCE_KINDS:
        raise UserError(
            f'config: [source] kind = "{kind}" is not supported.{did_you_mean(kind, SOURCE_KINDS)} '
            f"Use one of: {', '.join(SOURCE_KINDS)}."
        )
    database = _get(raw, "source", "database", str, None)
    events = _get(raw, "source", "events", str)
    customers = _get(raw, "source", "customers", str, None)
    read_options = _get(raw, "source", "read_options", dict, {})
    engine_keys = {"url", "url_env", "statement_timeout_s", "file_format", "spark_conf"}
    given = engine_keys & set(raw.get("source", {}))
    if kind in ("duckdb", "files") and given:
        raise UserError(
            f"config: [source] {', '.join(sorted(given))} only apply to kind = \"postgres\" or "
            f'"spark"; this source is kind = "{kind}". Remove them or change the kind.'
        )
    if kind in ("postgres", "spark"):
        return _engine_source(raw, kind, base, events, customers, read_options)
    if kind == "duckdb":
        if database is None:
            raise UserError(
                'config: [source] database is required when kind = "duckdb": give the path of the '
                "DuckDB file that holds the event log."
            )
        check_identifier(events, "[source] events table")
        if customers is not None:
            check_identifier(customers, "[source] customers table")
        db_path: Path | None = (base / database).resolve()
    else:
        # Files are read through an in-memory DuckDB; paths (globs allowed) resolve like the config.
        db_path = None
        events = str(base / events)
        customers = str(base / customers) if customers is not None else None
    return SourceConfig(kind, db_path, events, customers, read_options)


def _engine_source(
    raw: dict[str, Any],
    kind: str,
    base: Path,
    events: str,
    customers: str | None,
    read_options: dict[str, Any],
) -> SourceConfig:
    """[source] for kind postgres (tables) or spark (catalog tables, or files in file_format)."""
    if raw["source"].get("database") is not None:
        raise UserError(
            f'config: [source] database is for kind = "duckdb"; kind = "{kind}" reads from the '
            "server named by [source] url or the url_env environment variable. Remove database."
        )
    url = _get(raw, "source", "url", str, None)
    url_env = _get(raw, "source", "url_env", str, URL_ENV_DEFAULT)
    if not re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", url_env):
        raise UserError(
            f"config: [source] url_env = {url_env!r} is not an environment variable name. "
            "Use letters, digits and _ (for example CHURNLIFE_SOURCE_URL)."
        )
    if url is not None and kind == "postgres" and re.search(r"://[^/@]*:[^@/]*@", url):
        raise UserError(
            "config: [source] url holds a password. Config files are shared and copied: put "
            f"the URL with its password in the environment variable {url_env} instead (or use "
            "a ~/.pgpass file), and remove it from the config."
        )
    timeout = _get(raw, "source", "statement_timeout_s", int, 1800)
    if timeout <= 0:
        raise UserError(
            "config: [source] statement_timeout_s must be a positive number of seconds, "
            "e.g. 1800."
        )
    file_format = _get(raw, "source", "file_format", str, None)
    conf = _get(raw, "source", "spark_conf", dict, {})
    if kind == "postgres" and (file_format is not None or conf):
        raise UserError(
            'config: [source] file_format and spark_conf are for kind = "spark". Remove them.'
        )
    if file_format is not None and file_format not in SPARK_FILE_FORMATS:
        raise UserError(
            f'config: [source] file_format = "{file_format}" is not known.'
            f"{did_you_mean(file_format, SPARK_FILE_FORMATS)} Use one of: "
            f"{', '.join(SPARK_FILE_FORMATS)}."
        )
    if read_options and file_format is None:
        raise UserError(
            f'config: [source] read_options apply to files; kind = "{kind}" reads tables unless '
            "file_format is set. Set file_format or remove read_options."
        )
    if file_format is None:
        check_identifier(events, "[source] events table")
        if customers is not None:
            check_identifier(customers, "[source] customers table")
    else:
        events = str(base / events)
        customers = str(base / customers) if customers is not None else None
    return SourceConfig(
        kind, None, events, customers, read_options, url, url_env, timeout, file_format,
        {str(k): str(v) for k, v in conf.items()},
    )


def parse_config(raw: dict[str, Any], base: Path, config_path: Path | None = None) -> Config:
    """Validate a config already read into a dict."""
    _check_keys(raw)
    source = _parse_source(raw, base)
    kind = source.kind
    customers = source.customers

    columns: dict[str, str | None] = {}
    cols = raw.get("columns", {})
    for role in COLUMN_ROLES_EVENTS + COLUMN_ROLES_CUSTOMERS:
        value = cols.get(role)
        if value is None and role in ("customer_id", "event_time", "event_kind"):
            raise UserError(f"config: [columns] {role} is required: name the column that holds it.")
        if value is not None:
            check_identifier(value, f"[columns] {role}")
        columns[role] = value

    log_start = _date(raw, "log_start")
    as_of = _date(raw, "as_of")
    if as_of < log_start:
        raise UserError(
            f"config: [window] as_of ({as_of}) is before log_start ({log_start}). "
            "Set as_of to the date the data was extracted (on or after the log's first day)."
        )

    unit = _get(raw, "tenure", "unit", str, "months")
    if unit not in TENURE_UNITS:
        raise UserError(
            f'config: [tenure] unit = "{unit}" is not known.{did_you_mean(unit, TENURE_UNITS)} '
            f"Use one of: {', '.join(TENURE_UNITS)}."
        )
    period_months_raw = _get(raw, "tenure", "period_months", dict, {})
    period_months: dict[str, float] = {}
    for plan, months in period_months_raw.items():
        if isinstance(months, bool) or not isinstance(months, int | float) or months <= 0:
            raise UserError(
                f"config: [tenure] period_months.{plan} must be a positive number of months."
            )
        period_months[plan] = float(months)
    default_period = _get(raw, "tenure", "default_period_months", float, 1.0)
    if default_period <= 0:
        raise UserError("config: [tenure] default_period_months must be positive.")

    grace = _get(raw, "rules", "grace_days", int, 14)
    gap = _get(raw, "rules", "reactivation_gap_days", int, 30)
    if grace < 0 or gap < 0:
        raise UserError("config: [rules] grace_days and reactivation_gap_days must be ≥ 0 days.")
    incomplete = _get(raw, "rules", "incomplete_rows", str, "stop")
    if incomplete not in INCOMPLETE_ROWS:
        raise UserError(
            f'config: [rules] incomplete_rows = "{incomplete}" is not known.'
            f'{did_you_mean(incomplete, INCOMPLETE_ROWS)} Use "stop" (the default) or "drop".'
        )

    by = _get(raw, "cohorts", "by", list, [])
    for key in by:
        if key not in COHORT_KEYS:
            raise UserError(
                f'config: [cohorts] by has unknown attribute "{key}".'
                f"{did_you_mean(str(key), COHORT_KEYS)} Use any of: {', '.join(COHORT_KEYS)}."
            )
    if len(set(by)) != len(by):
        raise UserError("config: [cohorts] by lists an attribute twice. List each once.")
    if "channel" in by and columns["channel"] is None:
        raise UserError(
            'config: [cohorts] by includes "channel" but [columns] channel is not set. '
            "Name the channel column, or drop channel from the cohorts."
        )
    needs_price = "price_band" in by
    if (needs_price or "plan" in by) and columns["plan" if "plan" in by else "price"] is None:
        missing = "plan" if "plan" in by else "price"
        raise UserError(
            f'config: [cohorts] by uses "{missing if missing == "plan" else "price_band"}" but '
            f"[columns] {missing} is not set. Name that column, or drop it from the cohorts."
        )
    bands = _get(raw, "cohorts", "price_bands", list, [])
    if not all(isinstance(b, int | float) and not isinstance(b, bool) for b in bands) or sorted(
        bands
    ) != list(bands):
        raise UserError("config: [cohorts] price_bands must be increasing numbers, e.g. [20, 30].")
    if needs_price and not bands:
        raise UserError(
            "config: [cohorts] by includes price_band but price_bands is empty. "
            "Give the band edges, e.g. price_bands = [20, 30]."
        )

    retention_at = _get(raw, "report", "retention_at", list, [1, 3, 6, 12, 24])
    if not all(isinstance(t, int) and not isinstance(t, bool) and t > 0 for t in retention_at):
        raise UserError(
            "config: [report] retention_at must be positive whole tenures, e.g. [1, 12]."
        )
    confidence = _get(raw, "report", "confidence", float, 0.95)
    if not 0.5 <= confidence < 1:
        raise UserError("config: [report] confidence must be between 0.5 and 1, e.g. 0.95.")
    interval = _get(raw, "report", "interval", str, "log-log")
    if interval not in INTERVAL_KINDS:
        raise UserError(
            f'config: [report] interval = "{interval}" is not known. Use "log-log" or "plain".'
        )
    folder = _get(raw, "output", "folder", str, "churnlife-output")

    customers_cols = [c for c in COLUMN_ROLES_CUSTOMERS if columns[c] is not None]
    where = "customers" if customers is not None else "events"
    if customers is None and kind != "files" and columns["signup_date"] is not None:
        where = "events"
    if customers is not None and not customers_cols:
        raise UserError(
            "config: [source] customers is set but neither [columns] signup_date nor channel is. "
            "Name the columns to read from the customers table, or remove [source] customers."
        )

    return Config(
        source=source,
        columns=columns,
        customer_columns_in=where,
        event_codes=_codes(raw),
        log_start=log_start,
        as_of=as_of,
        tenure_unit=unit,
        period_months=period_months,
        default_period_months=float(default_period),
        grace_days=grace,
        reactivation_gap_days=gap,
        cohorts=tuple(by),
        price_bands=tuple(float(b) for b in bands),
        retention_at=tuple(retention_at),
        confidence=confidence,
        interval=interval,
        output_folder=(base / folder).resolve(),
        config_path=config_path,
        incomplete_rows=incomplete,
        value=parse_value_settings(raw.get("value", {})),
    )
