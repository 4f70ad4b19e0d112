"""The campaign log: what each campaign was built from and who was in treatment or holdout.

Two logical tables of the contract (``reachlist.schema``), created when absent: ``campaigns`` (one
row per campaign: parameters, rules used, counts, any consent/suppression override) and
``campaign_contacts`` (one row per listed customer with group ``treatment`` or ``holdout``). The
log lives in the warehouse, or in a local state DuckDB file when the warehouse is read-only
(``CampaignLog.open(wh, state="state.duckdb")``). A campaign and all its contacts are written in
one transaction; the same campaign id is refused unless ``replace=True``.

The contact cap reads every log that applies: with a state file, both the state file's log and
the campaign tables already in the warehouse (when it has them).

Unique keys: tables reachlist creates get ``PRIMARY KEY (campaign_id)`` and ``PRIMARY KEY
(campaign_id, customer_id)``, so two builds of one campaign running at once cannot both log it:
the second waits for the first and is refused. Log tables created earlier without keys keep
working as they are: reachlist does not alter a table it finds (it may be the warehouse owner's,
and adding a key fails when old rows repeat), so for them concurrent builds are not prevented;
recreate them (copy, drop, let reachlist create them, copy back) to get the keys.

>>> log = CampaignLog.open(wh)                                            # doctest: +SKIP
>>> log.record(record, contacts)                                          # doctest: +SKIP
"""

from __future__ import annotations

import contextlib
import json
import re
from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any, Self

import polars as pl

from reachlist import ids, statements
from reachlist.errors import InputError, ReachlistError, StateError, WarehouseError
from reachlist.query import Query
from reachlist.schema import LOG_TABLES
from reachlist.warehouse import Warehouse
from reachlist.wording import option

__all__ = ["GROUPS", "CampaignLog", "CampaignRecord", "check_campaign_id"]

GROUPS = ("treatment", "holdout")
_ID = re.compile(r"[A-Za-z0-9][A-Za-z0-9._:-]{0,79}")


def check_campaign_id(campaign_id: str) -> str:
    if not _ID.fullmatch(campaign_id):
        raise InputError(
            f"Expected a campaign id of letters, digits and . _ : - (at most 80, starting with a "
            f"letter or digit), found {campaign_id!r}.",
            hint=f"pass {option('campaign_id')} spring-mats-2026",
        )
    return campaign_id


@dataclass(frozen=True)
class CampaignRecord:
    """One row of ``campaigns``; the JSON fields are kept as Python values until written."""

    campaign_id: str
    created_at: datetime
    target: str
    purpose: str
    parameters: dict[str, Any] = field(default_factory=dict)
    rules: list[dict[str, Any]] = field(default_factory=list)
    counts: dict[str, Any] = field(default_factory=dict)
    overrides: tuple[str, ...] = ()
    sent_at: datetime | None = None  # when the list is sent (contacts' contacted_at); None: now

    def frame(self) -> pl.DataFrame:
        def js(value: Any) -> str:
            return json.dumps(value, default=str, sort_keys=True)

        return pl.DataFrame(
            {
                "campaign_id": [self.campaign_id],
                "created_at": [self.created_at],
                "target": [self.target],
                "purpose": [self.purpose],
                "parameters": [js(self.parameters)],
                "rules": [js(self.rules)],
                "counts": [js(self.counts)],
                "overrides": ["; ".join(self.overrides) if self.overrides else None],
            },
            schema={
                "campaign_id": pl.String,
                "created_at": pl.Datetime("us"),
                "target": pl.String,
                "purpose": pl.String,
                "parameters": pl.String,
                "rules": pl.String,
                "counts": pl.String,
                "overrides": pl.String,
            },
        )


MAX_HORIZON_DAYS = 1_825
"""The longest take-up horizon a campaign may have; older campaigns' holdouts are not read."""


class CampaignLog:
    """The campaign log in one database (the warehouse, or a local state file)."""

    def __init__(
        self,
        db: Warehouse,
        *,
        owned: bool = False,
        also: tuple[CampaignLog, ...] = (),
        text_ids: bool | None = None,
    ) -> None:
        self.db = db
        self._owned = owned  # opened here (a state file): closed by close()
        self.also = also  # more logs the contact cap reads (never written)
        # customer ids are text in the warehouse this log belongs to (a state file has none)
        self.text_ids = db.text_ids if text_ids is None else text_ids

    @classmethod
    def open(cls, warehouse: Warehouse, state: str | None = None) -> CampaignLog:
        """The log in ``state`` (a DuckDB file, created when missing) or else in the warehouse.

        With ``state``, the warehouse's own log (when it has one) is read too, for the cap."""
        if state is None:
            return cls(warehouse)
        if "://" in state:
            raise InputError(
                f"Expected {option('state')} to be a local DuckDB file, found the URL {state!r}.",
                hint="pass a path such as reachlist-state.duckdb",
            )
        return cls(
            Warehouse.open(state, create=True),
            owned=True,
            also=(cls(warehouse),),
            text_ids=warehouse.text_ids,
        )

    def refuse_without_transactions(self) -> None:
        """A campaign is logged all or nothing; an engine without transactions (Spark) cannot
        hold the log, a local state file can."""
        if not self.db.transactional:
            raise InputError(
                f"Expected a campaign log that can be written all or nothing, found "
                f"{self.db.display_name} ({self.db.dialect.name} has no transactions).",
                hint=f"keep the log in a local file: pass {option('state')} reachlist-state.duckdb",
            )

    def close(self) -> None:
        if self._owned:
            self.db.close()

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    @property
    def where(self) -> str:
        return self.db.display_name

    @property
    def read_from(self) -> list[str]:
        """Where the contact cap reads: this log and every other log that has contacts."""
        others = [
            log.where
            for log in self.also
            if log.db.physical_columns("campaign_contacts") is not None
        ]
        return [self.where, *others]

    def present(self) -> bool:
        return all(self.db.physical_columns(t) is not None for t in LOG_TABLES)

    def unkeyed(self) -> list[str]:
        """Log tables present without a unique key (created by an earlier reachlist): for them,
        concurrent builds of one campaign are not prevented."""
        out = []
        for table in LOG_TABLES:
            if self.db.physical_columns(table) is None:
                continue
            q = statements.table_keys(self.db.mapping.table(table).physical)
            if not self.db.scalar(q):
                out.append(self.db.mapping.table(table).physical_name)
        return out

    def has_campaign(self, campaign_id: str) -> bool:
        if self.db.physical_columns("campaigns") is None:
            return False
        q = Query.from_template("campaign_exists", {"campaign_id": campaign_id})
        return bool(self.db.scalar(q))

    def refuse_existing(self, campaign_id: str, *, replace: bool) -> None:
        if not replace and self.has_campaign(campaign_id):
            raise StateError(
                f"Campaign {campaign_id!r} is already in the campaign log at {self.where}; "
                "nothing was written.",
                hint=f"pass {option('replace=True')} to overwrite its record, or choose another {option('campaign_id')} id",
            )

    def recent_contacts(self, since: datetime, *, other_than: str | None = None) -> pl.Series:
        """Customers contacted (treatment group) at or after ``since`` by any other campaign,
        in this log or any log in ``also``."""
        found = [self._recent(since, other_than)]
        found += [log._recent(since, other_than) for log in self.also]
        found = [f for f in found if f.len()]
        if not found:
            return pl.Series("customer_id", [], dtype=pl.Int64)
        return pl.concat(found, how="vertical_relaxed").unique().sort()

    def live_holdouts(
        self, as_of: datetime, *, other_than: str | None = None
    ) -> tuple[pl.Series, list[str]]:
        """Customers held out by other campaigns whose take-up horizon has not ended at
        ``as_of`` (in this log and every log in ``also``), and those campaigns' ids: they stay
        out of new treatment groups so the holdouts keep measuring. Campaigns sent more than
        ``MAX_HORIZON_DAYS`` ago are not read."""
        members: list[pl.Series] = []
        live: list[str] = []
        for log in (self, *self.also):
            found, ids = log._live_holdouts(as_of, other_than)
            live += ids
            if found.len():
                members.append(found)
        if not members:
            return pl.Series("customer_id", [], dtype=pl.Int64), live
        return pl.concat(members, how="vertical_relaxed").unique().sort(), sorted(set(live))

    def _live_holdouts(
        self, as_of: datetime, other_than: str | None
    ) -> tuple[pl.Series, list[str]]:
        empty = pl.Series("customer_id", [], dtype=pl.Int64)
        if not self.present():
            return empty, []
        since = as_of - timedelta(days=MAX_HORIZON_DAYS)
        sent = self.db.fetch(
            Query.from_template(
                "live_holdout_campaigns",
                {"holdout": "holdout", "since": since, "campaign_id": other_than or ""},
            )
        )
        live = []
        for campaign_id, sent_at, parameters in sent.iter_rows():
            horizon = json.loads(parameters or "{}").get("horizon_days") or 30
            if sent_at + timedelta(days=int(horizon)) > as_of:
                live.append(str(campaign_id))
        if not live:
            return empty, []
        found = self.db.fetch(
            Query.from_template("holdout_members", {"holdout": "holdout", "campaign_ids": live})
        )
        return ids.normalise(found["customer_id"]), live

    def _recent(self, since: datetime, other_than: str | None) -> pl.Series:
        if self.db.physical_columns("campaign_contacts") is None:
            return pl.Series("customer_id", [], dtype=pl.Int64)
        q = Query.from_template(
            "recent_contacts",
            {"treatment": "treatment", "since": since, "campaign_id": other_than or ""},
        )
        return ids.normalise(self.db.fetch(q)["customer_id"])

    def record(
        self, record: CampaignRecord, contacts: pl.DataFrame, *, replace: bool = False
    ) -> None:
        """Write the campaign and its contacts (customer_id, contact_group, score, rule_id) in one
        transaction, creating the log tables first when they are absent."""
        with self.recording(record, contacts, replace=replace):
            pass

    @contextlib.contextmanager
    def recording(
        self, record: CampaignRecord, contacts: pl.DataFrame, *, replace: bool = False
    ) -> Iterator[None]:
        """As ``record``, but the transaction commits only when the ``with`` block ends without
        an error: ``build_list`` moves the list file into place inside it, so the log never
        commits for a list that is not there. An error in the block rolls everything back."""
        check_campaign_id(record.campaign_id)
        self.refuse_without_transactions()
        groups = set(contacts["contact_group"].unique().to_list())
        if not groups <= set(GROUPS):
            raise InputError(f"contact_group must be one of {GROUPS}, found {sorted(groups)}.")
        rows = contacts.select(
            pl.lit(record.campaign_id, dtype=pl.String).alias("campaign_id"),
            pl.col("customer_id").cast(pl.String if self.text_ids else pl.Int64),
            pl.col("contact_group").cast(pl.String),
            pl.col("score").cast(pl.Float64),
            pl.col("rule_id").cast(pl.String),
            pl.lit(record.sent_at or record.created_at, dtype=pl.Datetime("us")).alias(
                "contacted_at"
            ),
        )
        # Every read happens before the transaction: on some engines a read ends a transaction.
        missing = [t for t in LOG_TABLES if self.db.physical_columns(t) is None]
        exists = not missing and self.has_campaign(record.campaign_id)
        if exists and not replace:
            self.refuse_existing(record.campaign_id, replace=False)
        inside = False  # the caller's block is running: its errors are its own
        try:
            with self.db.transaction():
                for table in missing:
                    try:
                        self.db.run_statement(
                            statements.create_log_table(
                                self.db.mapping, table, text_ids=self.text_ids
                            )
                        )
                    except WarehouseError as exc:
                        if _is_key_clash(exc.message):  # another build created it just now
                            raise StateError(
                                f"Another build created the campaign log table {table} in "
                                f"{self.where} while this one ran; this build wrote nothing "
                                "(no log rows, no list file).",
                                hint="run the build again",
                            ) from None
                        raise StateError(
                            f"Could not create the campaign log table {table} in {self.where} "
                            f"({exc.message.rstrip('.')}); nothing was written.",
                            hint="when the warehouse is read-only, keep the log locally with "
                            f"{option('state')} PATH",
                        ) from None
                if exists:
                    for table in LOG_TABLES:
                        self._delete(table, record.campaign_id)
                self._append("campaigns", record.frame(), record.campaign_id)
                self._append("campaign_contacts", rows, record.campaign_id)
                inside = True
                yield
                inside = False
        except ReachlistError:
            raise
        except Exception as exc:
            if inside:
                raise
            raise self._write_error("campaigns", exc, record.campaign_id) from None

    def _delete(self, table: str, campaign_id: str) -> None:
        self.db.execute(statements.delete_campaign(self.db.mapping, table, campaign_id))

    def set_send_date(self, campaign_id: str, sent_at: datetime) -> int:
        """Record the day a logged campaign is (or was) sent: every contact's ``contacted_at``
        and ``send_date`` in its parameters, in one transaction. ``results`` counts the horizon
        from it and the contact cap of later campaigns reads it. Returns the contacts moved."""
        record = self.campaign(campaign_id)
        if record is None:
            raise InputError(
                f"Expected campaign {campaign_id!r} in the campaign log at {self.where}, found no "
                "such campaign.",
                hint=f"list the logged campaigns with `reachlist campaigns` (with {option('state')} PATH when "
                "the log is kept in a local file)",
            )
        parameters = dict(record["parameters"])
        parameters["send_date"] = sent_at.date().isoformat()
        moved = self.contacts(campaign_id).height
        changes = []
        for table, column, value in (
            ("campaign_contacts", "contacted_at", sent_at),
            ("campaigns", "parameters", json.dumps(parameters, default=str, sort_keys=True)),
        ):
            changes.append(
                statements.set_campaign_value(self.db.mapping, table, column, value, campaign_id)
            )
        try:
            with self.db.transaction():
                for change in changes:
                    self.db.execute(change)
        except ReachlistError:
            raise
        except Exception as exc:
            raise self._write_error("campaign_contacts", exc, campaign_id) from None
        return moved

    def _append(self, table: str, frame: pl.DataFrame, campaign_id: str) -> None:
        try:
            self.db.load_frame(table, frame)
        except Exception as exc:  # a read-only database, a missing privilege, a unique key
            raise self._write_error(table, exc, campaign_id) from None

    def _write_error(self, table: str, exc: BaseException, campaign_id: str) -> StateError:
        text = (str(exc).strip().splitlines() or [type(exc).__name__])[0]
        if _is_key_clash(text):
            return StateError(
                f"Campaign {campaign_id!r} was logged in {self.where} by another build while "
                "this one ran; this build wrote nothing (no log rows, no list file).",
                hint=f"check `reachlist results` for the campaign that was logged; pass {option('replace=True')} "
                "to replace it with this build's list",
            )
        return StateError(
            f"Could not write the campaign log table {table} in {self.where} "
            f"({text}); nothing was written.",
            hint=f"when the warehouse is read-only, keep the log locally with {option('state')} PATH",
        )

    # -- reading ---------------------------------------------------------------------------------
    def campaign(self, campaign_id: str) -> dict[str, Any] | None:
        """The campaign's row with its JSON fields decoded, or None."""
        if self.db.physical_columns("campaigns") is None:
            return None
        df = self.db.fetch(Query.from_template("logged_campaign", {"campaign_id": campaign_id}))
        if df.height == 0:
            return None
        row = df.row(0, named=True)
        for key in ("parameters", "rules", "counts"):
            row[key] = json.loads(row[key])
        return row

    def contacts(self, campaign_id: str) -> pl.DataFrame:
        return self.db.fetch(Query.from_template("logged_contacts", {"campaign_id": campaign_id}))


def _is_key_clash(text: str) -> bool:
    """A unique key refused a row: another writer got there first (engine messages differ)."""
    lowered = text.lower()
    return any(k in lowered for k in ("duplicate key", "unique constraint", "primary key"))
