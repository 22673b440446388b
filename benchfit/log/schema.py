"""The measurement log's schema: one list of migrations for every backend (SQLite, PostgreSQL).

Layout (schema version 3)::

    benchfit_schema(version, applied_utc)          one row per applied migration
    units(id, serial UNIQUE, first_seen_utc)
    runs(id, unit_id → units, command, time_utc, operator, benchfit_version, verdict, details_json,
         uuid UNIQUE, bench, stored_utc)
    captures(id, run_id → runs, role, path, sha256, metadata_json)
    results(id, run_id → runs, capture_id → captures, role, source, channel, quantity,
            value, uncertainty, unit)               uncertainty = standard uncertainty (k = 1)
    decisions(id, run_id → runs, quantity, channel, label, value, expanded_u, lower, upper,
              unit, rule, decision, note)           expanded_u = U (k = 2)
    drift_series(id, run_id → runs, channel, k, t_start_s, t_mid_s, frequency_hz, ...)
                                                    one row per interval of a drift run

``id`` is the log's own integer (local to one database); ``runs.uuid`` is the run's global
identity, made once when the run is first written and carried unchanged by spool, sync and
merge, so a run copied twice is still one run. ``bench`` names the station that measured.
``time_utc`` is when the run was taken (the server's clock when written straight to a
server, the bench's clock when it was spooled or comes from an SQLite log); ``stored_utc``
is when this database stored it. Times are ISO 8601 text ``YYYY-MM-DDTHH:MM:SS.ffffffZ`` on
both backends so that listings and exports are the same text everywhere.

How a migration is written
--------------------------
:data:`MIGRATIONS` is the only definition. Each entry is ``(version, sql)``: statements
separated by ``;`` in the SQL both backends understand, with these tokens filled in per
backend (:func:`render`):

``{pk}``     an integer primary key that numbers itself
``{float}``  a double-precision number (PostgreSQL's REAL is single precision)
``{uuid}``   an expression making a new random UUID as text
``{now}``    the current UTC time as ISO text

Both backends apply the missing versions in order inside one transaction (SQLite
``BEGIN IMMEDIATE``, PostgreSQL an advisory lock) and record each in ``benchfit_schema``.
To add schema 4 — say a table of per-run figures — append one entry (and, for a table
of run rows, put its name in :data:`RUN_TABLES` below)::

    (4, '''
    CREATE TABLE run_figures (
        id {pk},
        run_id BIGINT NOT NULL REFERENCES runs(id),
        ...
    );
    CREATE INDEX run_figures_run ON run_figures(run_id)
    '''),

:data:`SCHEMA_VERSION` follows from the list. Never edit an entry that has been released:
logs in the field have applied it. Every foreign key gets an index (a test checks this on
both backends). A new table whose rows belong to a run (``run_id``, no other foreign key)
also goes into :data:`RUN_TABLES`, in this file: then spool, sync and merge carry its rows with
the run, with no other change (a test adds such a table this way on both backends).
"""

from __future__ import annotations

from typing import Literal

__all__ = ["MIGRATIONS", "RUN_TABLES", "SCHEMA_VERSION", "VERSION_TABLE", "Dialect", "render", "statements"]

Dialect = Literal["sqlite", "postgresql"]

VERSION_TABLE = ("CREATE TABLE IF NOT EXISTS benchfit_schema "
                 "(version INTEGER PRIMARY KEY, applied_utc TEXT NOT NULL)")

MIGRATIONS: tuple[tuple[int, str], ...] = (
    (1, """
    CREATE TABLE units (
        id {pk},
        serial TEXT NOT NULL UNIQUE,
        first_seen_utc TEXT NOT NULL
    );
    CREATE TABLE runs (
        id {pk},
        unit_id BIGINT REFERENCES units(id),
        command TEXT NOT NULL,
        time_utc TEXT NOT NULL,
        operator TEXT,
        benchfit_version TEXT NOT NULL,
        verdict TEXT,
        details_json TEXT NOT NULL DEFAULT '{{}}'
    );
    CREATE INDEX runs_time ON runs(time_utc);
    CREATE INDEX runs_unit ON runs(unit_id);
    CREATE TABLE captures (
        id {pk},
        run_id BIGINT NOT NULL REFERENCES runs(id),
        role TEXT NOT NULL DEFAULT '',
        path TEXT,
        sha256 TEXT,
        metadata_json TEXT NOT NULL DEFAULT '{{}}'
    );
    CREATE TABLE results (
        id {pk},
        run_id BIGINT NOT NULL REFERENCES runs(id),
        capture_id BIGINT REFERENCES captures(id),
        role TEXT NOT NULL DEFAULT '',
        source TEXT NOT NULL,
        channel TEXT,
        quantity TEXT NOT NULL,
        value {float},
        uncertainty {float},
        unit TEXT NOT NULL DEFAULT ''
    );
    CREATE INDEX results_quantity ON results(quantity);
    CREATE TABLE decisions (
        id {pk},
        run_id BIGINT NOT NULL REFERENCES runs(id),
        quantity TEXT NOT NULL,
        channel TEXT,
        label TEXT,
        value {float},
        expanded_u {float},
        lower {float},
        upper {float},
        unit TEXT NOT NULL DEFAULT '',
        rule TEXT NOT NULL,
        decision TEXT NOT NULL,
        note TEXT NOT NULL DEFAULT ''
    )
    """),
    # 2: global run identity, station name, storage time; an index on every foreign key
    # (without them `log list` and `log show` scan captures/results/decisions once per run)
    (2, """
    ALTER TABLE runs ADD COLUMN uuid TEXT;
    ALTER TABLE runs ADD COLUMN bench TEXT;
    ALTER TABLE runs ADD COLUMN stored_utc TEXT;
    UPDATE runs SET uuid = {uuid} WHERE uuid IS NULL;
    UPDATE runs SET stored_utc = time_utc WHERE stored_utc IS NULL;
    CREATE UNIQUE INDEX runs_uuid ON runs(uuid);
    CREATE INDEX runs_bench ON runs(bench);
    CREATE INDEX runs_time_id ON runs(time_utc, id);
    CREATE INDEX captures_run ON captures(run_id);
    CREATE INDEX results_run ON results(run_id);
    CREATE INDEX results_capture ON results(capture_id);
    CREATE INDEX decisions_run ON decisions(run_id)
    """),
    # 3: the interval series of a drift run (`benchfit drift`), one row per channel and interval
    (3, """
    CREATE TABLE drift_series (
        id {pk},
        run_id BIGINT NOT NULL REFERENCES runs(id),
        channel TEXT NOT NULL,
        k INTEGER NOT NULL,
        t_start_s {float},
        t_mid_s {float},
        frequency_hz {float},
        frequency_u_hz {float},
        chain_frequency_hz {float},
        chain_frequency_u_hz {float},
        phase_rad {float},
        phase_u_rad {float},
        segment INTEGER,
        amplitude {float},
        amplitude_u {float},
        vrms {float},
        thd_pct {float},
        thd_u_pct {float},
        duty_cycle_pct {float},
        duty_cycle_u_pct {float},
        unit TEXT
    );
    CREATE UNIQUE INDEX drift_series_run ON drift_series(run_id, channel, k)
    """),
)

#: schema version this code writes: the last migration's
SCHEMA_VERSION: int = MIGRATIONS[-1][0]

#: tables added by later migrations whose rows each belong to one run: a ``run_id`` column
#: referencing runs(id), no other foreign key. Spool, sync and merge copy their rows with the
#: run (every column but ``id`` and ``run_id``), and the spool deletes them with it.
RUN_TABLES: tuple[str, ...] = ("drift_series",)

_TOKENS: dict[str, dict[str, str]] = {
    "sqlite": {"pk": "INTEGER PRIMARY KEY", "float": "REAL", "uuid": "bf_uuid()", "now": "bf_now()"},
    "postgresql": {"pk": "BIGINT GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY",
                   "float": "DOUBLE PRECISION", "uuid": "gen_random_uuid()::text",
                   "now": "to_char(clock_timestamp() AT TIME ZONE 'UTC', 'YYYY-MM-DD\"T\"HH24:MI:SS.US\"Z\"')"},
}


def render(sql: str, dialect: Dialect) -> str:
    """``sql`` with the tokens of :data:`MIGRATIONS` (``{pk}``, ``{float}``, ``{uuid}``, ``{now}``) filled in."""
    return sql.format(**_TOKENS[dialect])


def statements(version: int, dialect: Dialect) -> list[str]:
    """The statements of migration ``version`` for ``dialect``, one string each."""
    sql = dict(MIGRATIONS)[version]
    return [s.strip() for s in render(sql, dialect).split(";") if s.strip()]
