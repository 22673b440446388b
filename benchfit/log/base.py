"""What every log backend does the same way: writing and reading runs with one set of SQL.

A backend (:class:`~benchfit.log.sqlite.SQLiteStore`, :class:`~benchfit.log.postgres.PostgresStore`)
opens a DB-API connection, applies the migrations of :mod:`benchfit.log.schema`, and supplies
its placeholder style, its ``{now}`` expression and its transaction handling. Everything
else — the SQL of writing a run record, listing, showing, exporting — lives here once, so
``log list/show/export/stats`` give the same rows on both backends.

A run is written in one transaction: the run row (``ON CONFLICT (uuid) DO NOTHING``, so
writing a run that is already there is a no-op), then its captures, results and decisions.
A reader therefore never sees half a run, and a writer killed mid-transaction leaves none.
"""

from __future__ import annotations

import abc

import json
from typing import Any, Callable, Iterable, Iterator, Mapping, Sequence

from benchfit.errors import LogError
from benchfit.log import schema
from benchfit.log.schema import Dialect, render

__all__ = ["LogStore", "RUN_COLUMNS"]

#: columns of :meth:`LogStore.list_runs` rows, in order
RUN_COLUMNS = ("id", "uuid", "bench", "time_utc", "command", "unit", "operator", "verdict",
               "benchfit_version", "n_captures")

#: test seam: called inside a run's transaction just before COMMIT (None in normal use)
BEFORE_COMMIT: Callable[[], None] | None = None

_CAPTURE_COLS = ("role", "path", "sha256", "metadata_json")
_RESULT_COLS = ("role", "source", "channel", "quantity", "value", "uncertainty", "unit")
_DECISION_COLS = ("quantity", "channel", "label", "value", "expanded_u", "lower", "upper", "unit",
                  "rule", "decision", "note")


#: the largest integer SQLite and PostgreSQL store (64-bit signed)
_SQL_INT_MAX = 2 ** 63 - 1

class LogStore(abc.ABC):
    """One open log. Subclasses set :attr:`dialect`, :attr:`con` and :meth:`transaction`.

    ``where`` is how messages name the log (a file path, or a URL without password).
    """

    dialect: Dialect
    where: str
    con: Any

    # --- backend hooks ---------------------------------------------------------------

    @abc.abstractmethod
    def transaction(self) -> Any:
        """A context manager: one write transaction, committed on success, rolled back otherwise."""

    @abc.abstractmethod
    def _errors(self) -> tuple[type[BaseException], ...]:
        """The backend's own exception classes that mean "the log could not be read or written"."""

    def close(self) -> None:
        try:
            self.con.close()
        except Exception:  # closing a connection the server has dropped
            pass

    def __enter__(self) -> "LogStore":
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()

    # --- SQL helpers -----------------------------------------------------------------

    def sql(self, text: str) -> str:
        """``text`` written with ``?`` placeholders and ``{now}``, in this backend's form."""
        text = render(text, self.dialect) if "{" in text else text
        return text.replace("?", "%s") if self.dialect == "postgresql" else text

    def _rows(self, text: str, args: Sequence[Any] = ()) -> list[dict[str, Any]]:
        cur = self.con.execute(self.sql(text), tuple(args))
        names = [d[0] for d in cur.description]
        return [dict(zip(names, r)) for r in cur.fetchall()]

    def _one(self, text: str, args: Sequence[Any] = ()) -> Any:
        row = self.con.execute(self.sql(text), tuple(args)).fetchone()
        return None if row is None else row[0]

    def _read(self, fn: Callable[[], Any], what: str) -> Any:
        try:
            return fn()
        except self._errors() as e:
            raise LogError(f"{self.where}: cannot read {what} ({str(e).strip()}) — check the log") from e

    # --- writing ---------------------------------------------------------------------

    def insert_record(self, rec: Mapping[str, Any]) -> tuple[int, bool]:
        """Write one run record inside the caller's transaction: ``(local id, newly stored)``.

        A record whose UUID is already in the log is not written again (``False``).
        """
        run = rec["run"]
        execute = self.con.execute
        have = execute(self.sql("SELECT id FROM runs WHERE uuid = ?"), (run["uuid"],)).fetchone()
        if have is not None:  # already stored (checked first so that a repeat uses up no id)
            return int(have[0]), False
        unit_id = None
        if run.get("unit"):
            find = self.sql("SELECT id FROM units WHERE serial = ?")
            row = execute(find, (run["unit"],)).fetchone()
            if row is None:  # (looked up first: a conflicting insert would use up a PostgreSQL id)
                execute(self.sql("INSERT INTO units(serial, first_seen_utc) VALUES (?, {now}) "
                                 "ON CONFLICT (serial) DO NOTHING"), (run["unit"],))
                row = execute(find, (run["unit"],)).fetchone()
            unit_id = row[0]
        when = "?" if run.get("time_utc") else "{now}"
        args = [run["uuid"], run.get("bench"), unit_id, run["command"]]
        if run.get("time_utc"):
            args.append(run["time_utc"])
        args += [run.get("operator"), run["benchfit_version"], run.get("verdict"), run.get("details_json") or "{}"]
        row = execute(self.sql(
            "INSERT INTO runs(uuid, bench, unit_id, command, time_utc, stored_utc, operator, benchfit_version,"
            f" verdict, details_json) VALUES (?, ?, ?, ?, {when}, {{now}}, ?, ?, ?, ?)"
            " ON CONFLICT (uuid) DO NOTHING RETURNING id"), tuple(args)).fetchone()
        if row is None:
            return int(execute(self.sql("SELECT id FROM runs WHERE uuid = ?"), (run["uuid"],)).fetchone()[0]), False
        run_id = int(row[0])
        cap_ids = []
        for c in rec.get("captures", ()):
            cap_ids.append(execute(self.sql(
                "INSERT INTO captures(run_id, role, path, sha256, metadata_json) VALUES (?, ?, ?, ?, ?) RETURNING id"),
                (run_id, c.get("role") or "", c.get("path"), c.get("sha256"), c.get("metadata_json") or "{}"),
            ).fetchone()[0])
        results = rec.get("results", ())
        if results:
            self._many("INSERT INTO results(run_id, capture_id, role, source, channel, quantity, value, uncertainty,"
                       " unit) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                       [(run_id, None if r.get("capture") is None else cap_ids[r["capture"]],
                         *(r.get(k) if k != "role" else r.get(k) or "" for k in _RESULT_COLS)) for r in results])
        decisions = rec.get("decisions", ())
        if decisions:
            self._many("INSERT INTO decisions(run_id, quantity, channel, label, value, expanded_u, lower, upper,"
                       " unit, rule, decision, note) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                       [(run_id, *(d.get(k) for k in _DECISION_COLS)) for d in decisions])
        for table, rows in (rec.get("tables") or {}).items():
            if table not in schema.RUN_TABLES:
                raise LogError(f"{self.where}: the run carries rows of table {table!r}, which this log does "
                               "not have — upgrade benchfit")
            for r in rows:
                cols = list(r)
                self.con.execute(self.sql(f"INSERT INTO {table}(run_id{''.join(', ' + c for c in cols)}) "
                                          f"VALUES (?{', ?' * len(cols)})"), (run_id, *(r[c] for c in cols)))
        return run_id, True

    def _many(self, text: str, rows: list[tuple[Any, ...]]) -> None:
        cur = self.con.cursor()
        try:
            cur.executemany(self.sql(text), rows)
        finally:
            cur.close()

    def write(self, rec: Mapping[str, Any]) -> tuple[int, bool]:
        """One run record in its own transaction: ``(local id, newly stored)``."""
        with self.transaction():
            out = self.insert_record(rec)
            if BEFORE_COMMIT is not None:
                BEFORE_COMMIT()
        return out

    def write_many(self, recs: Iterable[Mapping[str, Any]], batch: int = 500,
                   done: Callable[[Mapping[str, Any], int, bool], None] | None = None) -> tuple[int, int]:
        """Write records ``batch`` per transaction; ``(newly stored, already there)``.

        ``done(record, id, new)`` is called after each batch's COMMIT for each of its records.
        """
        new = old = 0
        pending: list[tuple[Mapping[str, Any], int, bool]] = []

        def flush() -> None:
            for r, i, n in pending:
                if done is not None:
                    done(r, i, n)
            pending.clear()

        it = iter(recs)
        while True:
            chunk = [r for _, r in zip(range(batch), it)]
            if not chunk:
                break
            with self.transaction():
                for r in chunk:
                    rid, is_new = self.insert_record(r)
                    new += is_new
                    old += not is_new
                    pending.append((r, rid, is_new))
            flush()
        return new, old

    def delete_run(self, run_id: int) -> None:
        """Remove one run and everything that belongs to it (used by the spool after a push)."""
        with self.transaction():
            for table in (*schema.RUN_TABLES, "results", "decisions", "captures"):
                self.con.execute(self.sql(f"DELETE FROM {table} WHERE run_id = ?"), (run_id,))
            self.con.execute(self.sql("DELETE FROM runs WHERE id = ?"), (run_id,))

    # --- reading ---------------------------------------------------------------------

    def run_ids(self) -> list[int]:
        return self._read(lambda: [r["id"] for r in self._rows("SELECT id FROM runs ORDER BY id")], "the runs")

    def read_record(self, run_id: int) -> dict[str, Any]:
        """The run record of a stored run (for copying it to another log)."""
        def go() -> dict[str, Any]:
            rows = self._rows("SELECT r.uuid, r.bench, u.serial AS unit, r.command, r.time_utc, r.operator,"
                              " r.benchfit_version, r.verdict, r.details_json FROM runs r"
                              " LEFT JOIN units u ON u.id = r.unit_id WHERE r.id = ?", (run_id,))
            if not rows:
                raise LogError(f"run {run_id}: no such run in {self.where} — see `benchfit log list`")
            caps = self._rows("SELECT id, role, path, sha256, metadata_json FROM captures WHERE run_id = ?"
                              " ORDER BY id", (run_id,))
            index = {c.pop("id"): i for i, c in enumerate(caps)}
            results = self._rows("SELECT capture_id, role, source, channel, quantity, value, uncertainty, unit"
                                 " FROM results WHERE run_id = ? ORDER BY id", (run_id,))
            for r in results:
                cid = r.pop("capture_id")
                r["capture"] = None if cid is None else index.get(cid)
            decisions = self._rows(f"SELECT {', '.join(_DECISION_COLS)} FROM decisions WHERE run_id = ?"
                                   " ORDER BY id", (run_id,))
            rec = {"run": rows[0], "captures": caps, "results": results, "decisions": decisions}
            tables = {}
            for table in schema.RUN_TABLES:
                extra = self._rows(f"SELECT * FROM {table} WHERE run_id = ? ORDER BY id", (run_id,))
                tables[table] = [{k: v for k, v in r.items() if k not in ("id", "run_id")} for r in extra]
            if tables:
                rec["tables"] = tables
            return rec
        return self._read(go, f"run {run_id}")

    def iter_records(self) -> Iterator[tuple[int, dict[str, Any]]]:
        for rid in self.run_ids():
            yield rid, self.read_record(rid)

    def list_runs(self, *, unit: str | None = None, since: str | None = None, bench: str | None = None,
                  last: int | None = None) -> list[dict[str, Any]]:
        """Runs in time order (:data:`RUN_COLUMNS`); ``last`` keeps only the latest so many."""
        sql = ("SELECT r.id, r.uuid, r.bench, r.time_utc, r.command, u.serial AS unit, r.operator, r.verdict,"
               " r.benchfit_version, (SELECT COUNT(*) FROM captures c WHERE c.run_id = r.id) AS n_captures"
               " FROM runs r LEFT JOIN units u ON u.id = r.unit_id WHERE 1=1")
        sql, args = _filtered(sql, [("u.serial = ?", unit), ("r.time_utc >= ?", since), ("r.bench = ?", bench)])
        if last:
            rows = self._read(lambda: self._rows(sql + " ORDER BY r.time_utc DESC, r.id DESC LIMIT ?",
                                                 [*args, min(int(last), _SQL_INT_MAX)]), "the runs")
            return rows[::-1]
        return self._read(lambda: self._rows(sql + " ORDER BY r.time_utc, r.id", args), "the runs")

    def get_run(self, run_id: int) -> dict[str, Any]:
        """Everything stored about one run: the run row, its captures, results and decisions."""
        def go() -> dict[str, Any]:
            # an id beyond SQL's 64-bit integers names no run (and cannot be bound as a parameter)
            rows = [] if not -_SQL_INT_MAX <= run_id <= _SQL_INT_MAX else self._rows(
                "SELECT r.id, r.uuid, r.bench, r.unit_id, r.command, r.time_utc, r.stored_utc,"
                " r.operator, r.benchfit_version, r.verdict, r.details_json, u.serial AS unit"
                " FROM runs r LEFT JOIN units u ON u.id = r.unit_id WHERE r.id = ?", (run_id,))
            if not rows:
                last = self._one("SELECT MAX(id) FROM runs")
                raise LogError(f"run {run_id}: no such run in {self.where} — "
                               + ("the log is empty" if last is None
                                  else f"run ids go from 1 to {last}; see `benchfit log list`"))
            run = rows[0]
            run["details"] = json.loads(run.pop("details_json") or "{}")
            caps = self._rows("SELECT id, role, path, sha256, metadata_json FROM captures WHERE run_id = ?"
                              " ORDER BY id", (run_id,))
            for c in caps:
                c["metadata"] = json.loads(c.pop("metadata_json") or "{}")
            run["captures"] = caps
            run["results"] = self._rows(
                "SELECT r.role, r.source, r.channel, r.quantity, r.value, r.uncertainty, r.unit, c.path AS file"
                " FROM results r LEFT JOIN captures c ON c.id = r.capture_id WHERE r.run_id = ? ORDER BY r.id",
                (run_id,))
            run["decisions"] = self._rows(f"SELECT {', '.join(_DECISION_COLS)} FROM decisions WHERE run_id = ?"
                                          " ORDER BY id", (run_id,))
            return run
        return self._read(go, f"run {run_id}")

    def results_rows(self, *, quantity: str | None = None, unit: str | None = None, since: str | None = None,
                     bench: str | None = None) -> list[dict[str, Any]]:
        """Flat rows, one per stored result, joined with their run, unit and capture (export, stats)."""
        sql = ("SELECT r.id AS run_id, r.time_utc, r.command, u.serial AS unit, r.operator, r.verdict,"
               " res.role, res.source, res.channel, res.quantity, res.value, res.uncertainty,"
               " res.unit AS value_unit, c.path AS file, c.sha256, r.bench, r.uuid AS run_uuid"
               " FROM results res JOIN runs r ON r.id = res.run_id LEFT JOIN units u ON u.id = r.unit_id"
               " LEFT JOIN captures c ON c.id = res.capture_id WHERE 1=1")
        sql, args = _filtered(sql, [("res.quantity = ?", quantity), ("u.serial = ?", unit),
                                    ("r.time_utc >= ?", since), ("r.bench = ?", bench)])
        return self._read(lambda: self._rows(sql + " ORDER BY r.time_utc, r.id, res.id", args), "the results")

    def counts(self) -> dict[str, int]:
        """Rows per table (runs, units, captures, results, decisions)."""
        return self._read(lambda: {t: int(self._one(f"SELECT COUNT(*) FROM {t}"))
                                   for t in ("runs", "units", "captures", "results", "decisions")}, "the counts")


def _filtered(sql: str, filters: list[tuple[str, Any]]) -> tuple[str, list[Any]]:
    args: list[Any] = []
    for clause, value in filters:
        if value:
            sql += f" AND {clause}"
            args.append(value)
    return sql, args
