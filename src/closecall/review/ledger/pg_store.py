"""The ledger in PostgreSQL: the same chain, canonical JSON and hashes as the SQLite file.

A team's ledger lives in one PostgreSQL database (schema ``closecall``), prepared once by its
owner with :func:`setup` (``closecall ledger setup URL``). The database, not closecall, enforces
who may do what:

* ``entries`` is append-only: UPDATE, DELETE and TRUNCATE are revoked from every role **and**
  refused by triggers; only the owner can drop or alter the table.
* Identity is the database ``session_user``: a trigger refuses an entry whose ``reviewer`` is
  not the session user, so nothing the client sends can record in someone else's name.
* Ordering: each append queues on a transaction-level advisory lock, then locks the one-row
  ``head`` table (``SELECT … FOR UPDATE`` in a SECURITY DEFINER function), reads the last
  sequence number and hash, and the insert trigger locks that row too (for a client that
  skipped the function), checks the new entry links to that head and moves it in the same
  transaction. Concurrent writers on any number of hosts are serialised by that row lock and
  can never fork the chain; a writer killed mid-transaction leaves nothing (PostgreSQL rolls
  it back).
* Durability: an append returns only once its entry is on disk. The entry's own commit
  releases the head before its flush (``synchronous_commit = off`` for that transaction
  alone); the append then commits a transaction that writes one small WAL record with
  ``synchronous_commit = on``, whose flush covers the entry, since WAL is written and flushed
  in order. So the disk's flush is outside the head's lock and concurrent writers share
  flushes; a crash can take back only entries whose appends had not returned, and always
  from the end of the chain (a later entry's WAL lies after its predecessor's), never from
  its middle.
* The stored row keeps the entry's canonical JSON (``body``, the exact bytes that are hashed)
  beside its hash, so a field added to the entry format needs no change of table.

References
----------
PostgreSQL documentation, "Explicit Locking" (row-level locks, SELECT FOR UPDATE, advisory
locks); "Message Flow" (simple query: several statements in one message);
"Row Security Policies"; "CREATE FUNCTION" (SECURITY DEFINER, writing such functions safely);
"WAL Configuration" (synchronous_commit), "Asynchronous Commit". Releasing locks before the
commit's log flush: DeWitt, Katz, Olken, Shapiro, Stonebraker & Wood, "Implementation techniques
for main memory database systems", SIGMOD 1984; Johnson, Pandis, Stoica, Athanassoulis &
Ailamaki, "Aether: a scalable approach to logging", PVLDB 3(1), 2010 (early lock release)
(both cited from memory).
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import re
import urllib.parse
from collections.abc import Callable, Iterable, Iterator, Mapping
from datetime import datetime
from types import TracebackType
from typing import TYPE_CHECKING, Any

from closecall.core.errors import AccessDenied, UserError
from closecall.review.ledger import entry as _entry
from closecall.review.ledger.drafts import Claim, Draft, utc_iso
from closecall.review.ledger.entry import (
    ENTRY_FORMAT,
    GENESIS_HASH,
    HASHED_FIELDS,
    Entry,
    EntryContent,
    canonical_json,
    entry_fields,
)

if TYPE_CHECKING:
    import psycopg

    from closecall.review.ledger.chain import VerifyResult

REVIEWER_ROLE = "closecall_reviewer"
ANALYST_ROLE = "closecall_analyst"
#: Seconds to wait for the server when connecting.
CONNECT_TIMEOUT = 10

_ROLE_RE = re.compile(r"^[a-z_][a-z0-9_]{0,62}$")


def is_url(value: object) -> bool:
    """True if a config's ledger value names a PostgreSQL database (URL or conninfo)."""
    text = str(value).strip()
    return text.startswith(("postgresql://", "postgres://")) or (
        "=" in text and ("dbname=" in text or "host=" in text)
    )


def _password_in(url: str) -> bool:
    if url.startswith(("postgresql://", "postgres://")):
        return urllib.parse.urlsplit(url).password is not None or "password=" in url
    return re.search(r"(^|\s)password\s*=", url) is not None


def redact(url: str) -> str:
    """The URL with any password replaced by ``***`` (for messages)."""
    if url.startswith(("postgresql://", "postgres://")):
        parts = urllib.parse.urlsplit(url)
        if parts.password is not None:
            host = parts.netloc.rsplit("@", 1)[1]
            netloc = f"{parts.username or ''}:***@{host}"
            url = urllib.parse.urlunsplit(parts._replace(netloc=netloc))
        return re.sub(r"password=[^&]*", "password=***", url)
    return re.sub(r"password\s*=\s*('[^']*'|\S+)", "password=***", url)


def check_url(url: str, where: str = "[review] ledger") -> None:
    """UserError if ``url`` carries a password (passwords never belong in a config)."""
    if _password_in(url):
        raise UserError(
            f"{where} = {redact(url)}: the ledger URL holds a password",
            "remove the password from the URL and give it to libpq another way: a line in "
            "~/.pgpass (mode 0600), the PGPASSWORD environment variable, or peer/GSS "
            "authentication",
        )


def _connect(url: str, *, autocommit: bool = False) -> psycopg.Connection[Any]:
    import psycopg

    try:
        conn = psycopg.connect(url, autocommit=autocommit, connect_timeout=CONNECT_TIMEOUT)
    except psycopg.OperationalError as exc:
        detail = str(exc).strip().splitlines()[-1] if str(exc).strip() else "no answer"
        raise UserError(
            f"{redact(url)}: cannot reach the ledger database ({detail})",
            "check that the PostgreSQL server is running and reachable from this host, that "
            "the URL in [review] ledger is right, and that your password is in ~/.pgpass or "
            "PGPASSWORD; nothing was recorded",
        ) from None
    if not autocommit:
        conn.execute("SET synchronous_commit = on")
        conn.commit()
    return conn


# ---------------------------------------------------------------------------- setup


def _schema_sql(reviewer: str, analyst: str) -> list[str]:
    return [
        "CREATE SCHEMA IF NOT EXISTS closecall",
        "REVOKE ALL ON SCHEMA closecall FROM PUBLIC",
        "GRANT USAGE ON SCHEMA closecall TO PUBLIC",
        "CREATE TABLE IF NOT EXISTS closecall.meta (key text PRIMARY KEY, value text NOT NULL)",
        """CREATE TABLE IF NOT EXISTS closecall.entries (
            seq bigint PRIMARY KEY CHECK (seq >= 1),
            reviewer text NOT NULL DEFAULT session_user,
            case_id text NOT NULL,
            action text NOT NULL,
            recorded_at timestamptz NOT NULL DEFAULT clock_timestamp(),
            body text NOT NULL,
            hash text NOT NULL UNIQUE,
            prev_hash text NOT NULL)""",
        "CREATE INDEX IF NOT EXISTS entries_case ON closecall.entries (case_id, seq)",
        "CREATE INDEX IF NOT EXISTS entries_reviewer ON closecall.entries (reviewer, seq)",
        """CREATE TABLE IF NOT EXISTS closecall.head (
            one boolean PRIMARY KEY DEFAULT true CHECK (one),
            seq bigint NOT NULL, hash text NOT NULL)""",
        f"INSERT INTO closecall.head VALUES (true, 0, '{GENESIS_HASH}') ON CONFLICT DO NOTHING",
        """CREATE TABLE IF NOT EXISTS closecall.drafts (
            reviewer text NOT NULL DEFAULT session_user,
            case_id text NOT NULL, note text NOT NULL, action text, reason text,
            updated timestamptz NOT NULL DEFAULT clock_timestamp(),
            PRIMARY KEY (reviewer, case_id))""",
        """CREATE TABLE IF NOT EXISTS closecall.claims (
            case_id text NOT NULL,
            reviewer text NOT NULL DEFAULT session_user,
            claimed_at timestamptz NOT NULL DEFAULT clock_timestamp(),
            expires_at timestamptz NOT NULL,
            PRIMARY KEY (case_id, reviewer))""",
        "ALTER TABLE closecall.claims ADD COLUMN IF NOT EXISTS instance text",
        # -- the chain: the head row is locked and moved by the insert trigger
        """CREATE OR REPLACE FUNCTION closecall.lock_head(OUT seq bigint, OUT hash text,
                OUT reviewer text, OUT now timestamptz)
            LANGUAGE sql SECURITY DEFINER SET search_path = pg_catalog, pg_temp AS $$
            SELECT h.seq, h.hash, session_user::text, clock_timestamp()
            FROM closecall.head h WHERE h.one FOR UPDATE $$""",
        # what an append sends first: removes the caller's own draft of the case, then locks
        # the head (one statement, so the append's first round trip carries no more)
        """CREATE OR REPLACE FUNCTION closecall.lock_head_for(case_id text, OUT seq bigint,
                OUT hash text, OUT reviewer text, OUT now timestamptz)
            LANGUAGE plpgsql SECURITY DEFINER SET search_path = pg_catalog, pg_temp AS $$
            BEGIN
              DELETE FROM closecall.drafts d
                WHERE d.reviewer = session_user AND d.case_id = lock_head_for.case_id;
              -- writers queue here first, then lock the row uncontended: under contention
              -- this cost the server less per append than queueing on the row lock
              -- (docs/performance.md); the row lock below is what the chain relies on
              PERFORM pg_advisory_xact_lock(hashtext('closecall.head'));
              SELECT h.seq, h.hash, session_user::text, clock_timestamp()
                INTO seq, hash, reviewer, now
                FROM closecall.head h WHERE h.one FOR UPDATE;
            END $$""",
        """CREATE OR REPLACE FUNCTION closecall.chain_entry() RETURNS trigger
            LANGUAGE plpgsql SECURITY DEFINER SET search_path = pg_catalog, pg_temp AS $$
            DECLARE h record; b jsonb;
            BEGIN
              SELECT * INTO h FROM closecall.head WHERE one FOR UPDATE;
              b := NEW.body::jsonb;
              IF current_setting('closecall.copying', true) = 'on'
                 AND pg_has_role(session_user, (SELECT relowner FROM pg_class
                     WHERE oid = 'closecall.entries'::regclass), 'MEMBER') THEN
                NEW.reviewer := b->>'reviewer';  -- ledger migrate, by the owner only
              ELSIF NEW.reviewer IS DISTINCT FROM session_user::text
                 OR b->>'reviewer' IS DISTINCT FROM session_user::text THEN
                RAISE EXCEPTION 'closecall: an entry records the session user %, not %',
                  session_user, coalesce(b->>'reviewer', NEW.reviewer)
                  USING ERRCODE = 'insufficient_privilege';
              END IF;
              IF NEW.seq <> h.seq + 1 OR NEW.prev_hash <> h.hash
                 OR (b->>'seq')::bigint <> NEW.seq OR b->>'prev_hash' <> NEW.prev_hash
                 OR b->>'case_id' <> NEW.case_id OR b->>'action' <> NEW.action THEN
                RAISE EXCEPTION 'closecall: entry % does not follow the head %', NEW.seq, h.seq
                  USING ERRCODE = 'serialization_failure';
              END IF;
              IF encode(sha256(convert_to(NEW.body, 'UTF8')), 'hex') <> NEW.hash THEN
                RAISE EXCEPTION 'closecall: entry % does not carry the hash of its body', NEW.seq
                  USING ERRCODE = 'data_exception';
              END IF;
              NEW.recorded_at := clock_timestamp();
              UPDATE closecall.head SET seq = NEW.seq, hash = NEW.hash WHERE one;
              RETURN NEW;
            END $$""",
        """CREATE OR REPLACE FUNCTION closecall.refuse_change() RETURNS trigger
            LANGUAGE plpgsql AS $$
            BEGIN
              RAISE EXCEPTION 'closecall: the ledger is append-only (% refused)', TG_OP
                USING ERRCODE = 'insufficient_privilege';
            END $$""",
        "DROP TRIGGER IF EXISTS entries_chain ON closecall.entries",
        "CREATE TRIGGER entries_chain BEFORE INSERT ON closecall.entries "
        "FOR EACH ROW EXECUTE FUNCTION closecall.chain_entry()",
        "DROP TRIGGER IF EXISTS entries_no_change ON closecall.entries",
        "CREATE TRIGGER entries_no_change BEFORE UPDATE OR DELETE ON closecall.entries "
        "FOR EACH ROW EXECUTE FUNCTION closecall.refuse_change()",
        "DROP TRIGGER IF EXISTS entries_no_truncate ON closecall.entries",
        "CREATE TRIGGER entries_no_truncate BEFORE TRUNCATE ON closecall.entries "
        "FOR EACH STATEMENT EXECUTE FUNCTION closecall.refuse_change()",
        "DROP TRIGGER IF EXISTS head_no_change ON closecall.head",
        "CREATE TRIGGER head_no_change BEFORE DELETE ON closecall.head "
        "FOR EACH ROW EXECUTE FUNCTION closecall.refuse_change()",
        # -- drafts: each reviewer sees and writes only their own; claims: all see, own write
        "ALTER TABLE closecall.drafts ENABLE ROW LEVEL SECURITY",
        "DROP POLICY IF EXISTS own_drafts ON closecall.drafts",
        "CREATE POLICY own_drafts ON closecall.drafts USING (reviewer = session_user) "
        "WITH CHECK (reviewer = session_user)",
        "ALTER TABLE closecall.claims ENABLE ROW LEVEL SECURITY",
        "DROP POLICY IF EXISTS see_claims ON closecall.claims",
        "CREATE POLICY see_claims ON closecall.claims FOR SELECT USING (true)",
        "DROP POLICY IF EXISTS own_claims ON closecall.claims",
        "CREATE POLICY own_claims ON closecall.claims FOR ALL "
        "USING (reviewer = session_user OR expires_at <= clock_timestamp()) "
        "WITH CHECK (reviewer = session_user)",
        # -- roles and privileges
        f"""DO $$ BEGIN
              IF NOT EXISTS (SELECT 1 FROM pg_roles WHERE rolname = '{reviewer}') THEN
                CREATE ROLE {reviewer} NOLOGIN; END IF;
              IF NOT EXISTS (SELECT 1 FROM pg_roles WHERE rolname = '{analyst}') THEN
                CREATE ROLE {analyst} NOLOGIN; END IF;
            END $$""",
        "REVOKE ALL ON ALL TABLES IN SCHEMA closecall FROM PUBLIC",
        f"REVOKE ALL ON ALL TABLES IN SCHEMA closecall FROM {reviewer}, {analyst}",
        # any grant to anyone else (made by hand since) goes too: setup restores the guards
        """DO $$ DECLARE g record; BEGIN
              FOR g IN SELECT DISTINCT c.relname, r.rolname FROM pg_class c
                  CROSS JOIN LATERAL aclexplode(c.relacl) a
                  JOIN pg_roles r ON r.oid = a.grantee
                  WHERE c.relnamespace = 'closecall'::regnamespace AND c.relkind = 'r'
                  AND a.grantee <> c.relowner LOOP
                EXECUTE format('REVOKE ALL ON closecall.%I FROM %I', g.relname, g.rolname);
              END LOOP;
            END $$""",
        "REVOKE ALL ON FUNCTION closecall.lock_head() FROM PUBLIC",
        "REVOKE ALL ON FUNCTION closecall.lock_head_for(text) FROM PUBLIC",
        "GRANT SELECT ON closecall.meta TO PUBLIC",
        f"GRANT SELECT ON closecall.entries, closecall.head TO {reviewer}, {analyst}",
        f"GRANT INSERT ON closecall.entries TO {reviewer}",
        f"GRANT SELECT, INSERT, UPDATE, DELETE ON closecall.drafts, closecall.claims TO {reviewer}",
        f"GRANT SELECT ON closecall.claims TO {analyst}",  # who has a case open: all may see
        f"GRANT EXECUTE ON FUNCTION closecall.lock_head() TO {reviewer}",
        f"GRANT EXECUTE ON FUNCTION closecall.lock_head_for(text) TO {reviewer}",
        "INSERT INTO closecall.meta VALUES ('application', 'closecall-ledger') "
        "ON CONFLICT (key) DO NOTHING",
        f"INSERT INTO closecall.meta VALUES ('entry_format', '{ENTRY_FORMAT}') "
        "ON CONFLICT (key) DO NOTHING",
        f"INSERT INTO closecall.meta VALUES ('reviewer_role', '{reviewer}') "
        "ON CONFLICT (key) DO UPDATE SET value = excluded.value",
        f"INSERT INTO closecall.meta VALUES ('analyst_role', '{analyst}') "
        "ON CONFLICT (key) DO UPDATE SET value = excluded.value",
    ]


def setup(url: str, reviewer_role: str = REVIEWER_ROLE, analyst_role: str = ANALYST_ROLE) -> None:
    """Create (or bring up to date) the ledger schema, guards and roles in ``url``'s database.

    Idempotent; run by the database owner (or a role allowed to create roles). Members are
    added afterwards with ``GRANT closecall_reviewer TO alice``.
    """
    import psycopg

    check_url(url, "URL")
    for name in (reviewer_role, analyst_role):
        if not _ROLE_RE.match(name):
            raise UserError(
                f"role name '{name}' is not a plain lower-case SQL name",
                "use lower-case letters, digits and _ (for example closecall_reviewer)",
            )
    with _connect(url) as conn:
        try:
            conn.execute("SELECT pg_advisory_xact_lock(hashtext('closecall.setup'))")
            for statement in _schema_sql(reviewer_role, analyst_role):
                conn.execute(statement.encode())
            conn.commit()
        except psycopg.errors.InsufficientPrivilege as exc:
            raise UserError(
                f"{redact(url)}: ledger setup refused by the server ({exc.diag.message_primary})",
                "run 'closecall ledger setup' as the database's owner, with permission to "
                "create roles (CREATEROLE)",
            ) from None


# ---------------------------------------------------------------------------- the ledger


_ENTRY_FIELDS = {f.name for f in dataclasses.fields(Entry)}


def _hashed_names(entry_format: int) -> tuple[str, ...]:
    """The field names the hash covers for this entry format (as the entry module says)."""
    names = getattr(_entry, "hashed_names", None)
    return tuple(names(entry_format)) if names is not None else HASHED_FIELDS


def _row_values(body: str, hash_: str) -> dict[str, Any]:
    """An entry's fields from its stored canonical body; fields of a later format that an
    older entry lacks take the entry's defaults."""
    values = json.loads(body)
    values["hash"] = hash_
    return {k: v for k, v in values.items() if k in _ENTRY_FIELDS}


class PgLedger:
    """An open PostgreSQL ledger; the same reading and appending surface as the SQLite one."""

    def __init__(self, url: str, conn: psycopg.Connection[Any], readonly: bool) -> None:
        self.url = url
        self.path = redact(url)
        self.readonly = readonly
        self._conn = conn
        self.drafts = PgDrafts(self)
        self.claims = PgClaims(self)

    def close(self) -> None:
        self._conn.close()

    def __enter__(self) -> PgLedger:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()

    @property
    def connection(self) -> psycopg.Connection[Any]:
        return self._conn

    def _read(self, sql: str, params: Iterable[Any] = ()) -> list[tuple[Any, ...]]:
        try:
            rows = self._conn.execute(sql.encode(), list(params)).fetchall()
        finally:
            self._conn.rollback()  # end the read transaction (no lock held between calls)
        return rows

    # ------------------------------------------------------------------ entries

    def append(self, content: EntryContent, sign: Callable[[bytes], str] | None = None) -> Entry:
        """Number, chain and store one entry as the session user; removes the draft.

        Writers queue for the head, so the chain never forks; the server checks the link, the
        hash and the identity before the insert stands, and the whole entry commits or
        nothing does.

        The head is held for as short a time as the chain allows: everything that does not
        depend on it is prepared before, and an append is two round trips to the server, of
        which the lock is held for one: (1) ``BEGIN``, the ``supersedes`` check and
        ``closecall.lock_head_for`` (which removes the caller's draft of the case, queues
        for the head and locks its row); then, once the entry is numbered, signed and hashed
        against that head, (2) the ``INSERT`` and its ``COMMIT``, which releases the head
        without waiting for the disk, then a small synchronous commit whose flush covers the
        entry: the append returns only once the entry is durable, but the next writer does not
        wait for this writer's flush (early lock release; the flushes of writers waiting at
        once are shared, PostgreSQL's group commit). Each round trip is one
        message of several statements (PostgreSQL's simple query protocol, the values quoted
        by libpq), sent in autocommit mode so the driver adds no ``BEGIN`` of its own.
        """
        import psycopg

        from closecall.review.ledger.store import _check_content

        if self.readonly:
            raise RuntimeError("ledger opened read-only")
        _check_content(content)
        fields = self._unchained_fields(content)  # before the lock: all but the head's part
        try:
            self._store(content, fields, sign)
        except psycopg.errors.InsufficientPrivilege as exc:
            raise self._denied("record reviews", exc) from None
        except psycopg.errors.UndefinedFunction:
            raise UserError(
                f"{self.path}: the ledger database was set up by an earlier closecall "
                "(closecall.lock_head_for is missing); nothing was recorded",
                f"ask the database's owner to run: closecall ledger setup '{self.path}' "
                "(it brings the schema up to date and keeps every entry); your draft is kept",
            ) from None
        except psycopg.errors.SerializationFailure:
            # the server refused an entry that does not follow the head: a client bug, not a
            # lost connection (an OperationalError too); the entry and the draft's removal
            # were rolled back
            raise
        except psycopg.OperationalError as exc:
            raise UserError(
                f"{self.path}: the connection to the ledger database was lost while recording "
                f"({str(exc).strip()})",
                "run 'closecall ledger show' to see whether the entry was recorded (an entry "
                "is stored whole or not at all; your draft is kept until it is), then record "
                "again if it is not there",
            ) from None
        return Entry(**fields)

    def _store(
        self, content: EntryContent, fields: dict[str, Any], sign: Callable[[bytes], str] | None
    ) -> None:
        """The two round trips of :meth:`append` (``fields`` completed in place)."""
        conn = self._conn
        conn.autocommit = True  # the transaction is the BEGIN … COMMIT sent below
        try:
            case = _literal(conn, content.case_id)
            if content.supersedes is None:
                *_, head_result = _send(conn, _BEGIN_SQL.format(case=case))
            else:
                checked = _BEGIN_CHECKED_SQL.format(seq=int(content.supersedes), case=case)
                _, earlier, head_result = _send(conn, checked)
                if earlier.ntuples == 0 or earlier.get_value(0, 0) != content.case_id.encode():
                    raise ValueError(
                        f"entry {content.supersedes} is not an earlier entry for {content.case_id}"
                    )
            head = _load_row(conn, head_result)  # the head is locked from here to the COMMIT
            body = self._chain(fields, head, sign)
            values = (content.action, body, fields["hash"], fields["prev_hash"])
            action, body_, hash_, prev = (_literal(conn, v) for v in values)
            _send(
                conn,
                _INSERT_COMMIT_SQL.format(
                    seq=int(fields["seq"]),
                    case=case,
                    action=action,
                    body=body_,
                    hash=hash_,
                    prev=prev,
                ),
            )
        finally:
            self._end()

    def _end(self) -> None:
        """Back to the connection's usual mode; an append that did not reach its COMMIT is
        rolled back (the entry, the draft's removal and the head lock go)."""
        from psycopg.pq import TransactionStatus

        conn = self._conn
        if conn.closed:
            return
        status = conn.info.transaction_status
        if status in (TransactionStatus.INTRANS, TransactionStatus.INERROR):
            conn.execute("ROLLBACK")  # the append's own BEGIN (sent in autocommit mode)
        elif status != TransactionStatus.IDLE:  # interrupted mid-statement: the server
            conn.close()  # rolls back what this session had begun when it goes
            return
        conn.autocommit = False

    @staticmethod
    def _unchained_fields(content: EntryContent) -> dict[str, Any]:
        """An entry's fields that do not depend on the head (filled in under the lock)."""
        return entry_fields(content, seq=None, time=None, reviewer=None, prev_hash=None)

    @staticmethod
    def _chain(
        fields: dict[str, Any], head: tuple[Any, ...], sign: Callable[[bytes], str] | None
    ) -> str:
        """Fill in ``fields`` from the locked head (seq, prev_hash, session user, server
        time), sign them and hash them; the canonical body to store."""
        head_seq, head_hash, user, now = head
        fields["seq"] = int(head_seq) + 1
        fields["prev_hash"] = str(head_hash)
        fields["reviewer"] = str(user)
        fields["time"] = utc_iso(now)
        if "signature" in HASHED_FIELDS:  # the author signs inside the lock
            signed = _entry.signed_message  # type: ignore[attr-defined,unused-ignore]
            fields["signature"] = sign(signed(fields)) if sign is not None else None
        body = canonical_json({k: fields[k] for k in _hashed_names(ENTRY_FORMAT)})
        fields["hash"] = hashlib.sha256(body).hexdigest()
        return body.decode("utf-8")

    def role_name(self, which: str) -> str:
        """The group role ``reviewer_role`` or ``analyst_role`` that setup named."""
        return self._role(which)

    def _role(self, which: str) -> str:
        rows = self._read("SELECT value FROM closecall.meta WHERE key = %s", (which,))
        return str(rows[0][0]) if rows else (REVIEWER_ROLE if "review" in which else ANALYST_ROLE)

    def _denied(self, what: str, exc: Exception | None = None) -> AccessDenied:
        role = self._role("reviewer_role" if what == "record reviews" else "analyst_role")
        user = self._read("SELECT session_user")[0][0]
        return AccessDenied(
            f"{self.path}: database user '{user}' may not {what} in this ledger "
            f"(not a member of the role {role})",
            f'ask the ledger database\'s owner to run: GRANT {role} TO "{user}";',
        )

    def session_user(self) -> str:
        """The database user this connection records as (the ledger's identity)."""
        return str(self._read("SELECT session_user")[0][0])

    def access(self, login: str | None = None) -> tuple[str, bool, bool]:
        """(session user, may record, may read) for ``login`` (default: the session user),
        as the database's group roles say; an unknown ``login`` may do nothing."""
        reviewer = self._role("reviewer_role")
        analyst = self._role("analyst_role")
        row = self._read(
            "SELECT session_user::text, "
            "coalesce((SELECT pg_has_role(r.oid, %s, 'MEMBER') FROM pg_roles r "
            "  WHERE r.rolname = coalesce(%s, session_user::text)), false), "
            "coalesce((SELECT pg_has_role(r.oid, %s, 'MEMBER') "
            "  OR pg_has_role(r.oid, %s, 'MEMBER') FROM pg_roles r "
            "  WHERE r.rolname = coalesce(%s, session_user::text)), false)",
            (reviewer, login, reviewer, analyst, login),
        )[0]
        return str(row[0]), bool(row[1]), bool(row[2])

    def check_access(self, record: bool) -> None:
        """AccessDenied naming the role to ask for, unless the session user holds it."""
        reviewer = self._role("reviewer_role")
        analyst = self._role("analyst_role")
        ok_record, ok_read = self._read(
            "SELECT pg_has_role(session_user, %s, 'MEMBER'), "
            "pg_has_role(session_user, %s, 'MEMBER') OR pg_has_role(session_user, %s, 'MEMBER')",
            (reviewer, reviewer, analyst),
        )[0]
        if record and not ok_record:
            raise self._denied("record reviews")
        if not ok_read:
            user = self._read("SELECT session_user")[0][0]
            raise AccessDenied(
                f"{self.path}: database user '{user}' may not read this ledger "
                f"(not a member of the role {analyst} or {reviewer})",
                f'ask the ledger database\'s owner to run: GRANT {analyst} TO "{user}";',
            )

    def entries(
        self,
        *,
        case_id: str | None = None,
        reviewer: str | None = None,
        limit: int | None = None,
        before: int | None = None,
    ) -> list[Entry]:
        """Entries in sequence order; ``limit``/``before`` page backwards as in SQLite."""
        where: list[str] = []
        params: list[Any] = []
        if before is not None:
            where.append("seq < %s")
            params.append(int(before))
        if case_id is not None:
            where.append("case_id = %s")
            params.append(case_id)
        if reviewer is not None:
            where.append("reviewer = %s")
            params.append(reviewer)
        sql = "SELECT body, hash FROM closecall.entries"
        sql += (f" WHERE {' AND '.join(where)}" if where else "") + " ORDER BY seq DESC"
        if limit is not None:
            sql += " LIMIT %s"
            params.append(int(limit))
        rows = self._read(sql, params)
        return [Entry(**_row_values(b, h)) for b, h in reversed(rows)]

    def latest_actions(self) -> list[tuple[str, str]]:
        rows = self._read(
            "SELECT DISTINCT ON (case_id) case_id, action, seq FROM closecall.entries "
            "ORDER BY case_id, seq DESC"
        )
        return [(str(c), str(a)) for c, a, _ in sorted(rows, key=lambda r: r[2])]

    def entry(self, seq: int) -> Entry | None:
        rows = self._read("SELECT body, hash FROM closecall.entries WHERE seq = %s", (seq,))
        return Entry(**_row_values(*rows[0])) if rows else None

    def iter_rows(self) -> Iterator[dict[str, Any]]:
        """Every stored entry as the verifier reads it (``decisions`` as JSON text)."""
        with self._conn.cursor(name="closecall_rows") as cur:
            cur.itersize = 2000
            cur.execute("SELECT seq, body, hash, prev_hash FROM closecall.entries ORDER BY seq")
            for seq, body, hash_, prev in cur:
                try:
                    values = _row_values(body, hash_)
                except ValueError:
                    values = {"seq": seq, "decisions": "", "hash": hash_, "prev_hash": prev}
                if "signature" in _ENTRY_FIELDS:
                    values.setdefault("signature", None)
                if values.get("seq") != seq or values.get("prev_hash") != prev:
                    values["hash"] = f"(row {seq} columns disagree with its body)"
                values["decisions"] = (
                    canonical_json(values["decisions"]).decode("utf-8")
                    if not isinstance(values.get("decisions"), str)
                    else values["decisions"]
                )
                values["seq"] = seq
                yield values
        self._conn.rollback()

    def count(self) -> int:
        return int(self._read("SELECT count(*) FROM closecall.entries")[0][0])

    def head(self) -> tuple[int, str]:
        rows = self._read("SELECT seq, hash FROM closecall.entries ORDER BY seq DESC LIMIT 1")
        return (int(rows[0][0]), str(rows[0][1])) if rows else (0, GENESIS_HASH)

    def missing_triggers(self) -> list[str]:
        rows = self._read(
            "SELECT tgname FROM pg_trigger WHERE tgrelid = 'closecall.entries'::regclass "
            "AND tgenabled <> 'D'"
        )
        have = {r[0] for r in rows}
        return [
            t
            for t in ("entries_chain", "entries_no_change", "entries_no_truncate")
            if t not in have
        ]

    def privilege_findings(self) -> list[Any]:
        """Table privileges of anyone but the owner that differ from what setup grants: an
        UPDATE, DELETE or TRUNCATE granted to the roles (or to anyone), or a grant removed."""
        from closecall.review.ledger.schema import Finding

        expected = _expected_grants(self._role("reviewer_role"), self._role("analyst_role"))
        rows = self._read(
            "SELECT c.relname, coalesce(r.rolname, 'PUBLIC'), a.privilege_type "
            "FROM pg_class c CROSS JOIN LATERAL aclexplode(c.relacl) a "
            "LEFT JOIN pg_roles r ON r.oid = a.grantee "
            "WHERE c.relnamespace = 'closecall'::regnamespace AND c.relkind = 'r' "
            "AND a.grantee <> c.relowner"
        )
        have = {(str(t), str(g), str(p)) for t, g, p in rows}
        findings = [
            Finding(
                "privilege-granted",
                f"{table}.{grantee}",
                f"{grantee} was granted {privilege} on closecall.{table}, which setup never grants",
            )
            for table, grantee, privilege in sorted(have - expected)
        ]
        findings += [
            Finding(
                "privilege-missing",
                f"{table}.{grantee}",
                f"the grant of {privilege} on closecall.{table} to {grantee} was revoked",
            )
            for table, grantee, privilege in sorted(expected - have)
        ]
        return findings

    def policy_findings(self) -> list[Any]:
        """Row-level security of drafts and claims: switched on, its policies as setup made
        them (each reviewer writes only their own drafts and claims)."""
        from closecall.review.ledger.schema import Finding

        findings: list[Finding] = []
        rows = self._read(
            "SELECT relname, relrowsecurity FROM pg_class "
            "WHERE relnamespace = 'closecall'::regnamespace AND relname IN ('drafts', 'claims')"
        )
        for table, on in sorted(rows):
            if not on:
                findings.append(
                    Finding(
                        "row-security-off",
                        str(table),
                        f"row-level security is switched off on closecall.{table}",
                    )
                )
        rows = self._read(
            "SELECT p.polname, c.relname, p.polcmd, "
            "coalesce(pg_get_expr(p.polqual, p.polrelid), ''), "
            "coalesce(pg_get_expr(p.polwithcheck, p.polrelid), ''), "
            "p.polpermissive, p.polroles = '{0}' "
            "FROM pg_policy p JOIN pg_class c ON c.oid = p.polrelid "
            "WHERE c.relnamespace = 'closecall'::regnamespace"
        )
        have = {
            str(name): (str(table), str(cmd), _expr(qual), _expr(check), bool(perm), bool(pub))
            for name, table, cmd, qual, check, perm, pub in rows
        }
        for name, want in _POLICIES.items():
            got = have.pop(name, None)
            if got is None:
                findings.append(
                    Finding("policy-missing", name, f"the row-level policy {name} was dropped")
                )
            elif got != want:
                findings.append(
                    Finding(
                        "policy-altered",
                        name,
                        f"the row-level policy {name} on closecall.{got[0]} was changed",
                    )
                )
        for name, got in sorted(have.items()):
            findings.append(
                Finding(
                    "unexpected-object",
                    name,
                    f"a row-level policy {name} on closecall.{got[0]} was added",
                )
            )
        return findings

    def structure_findings(self) -> list[Any]:
        """Guard triggers, table privileges and row-level policies that differ from what
        ``ledger setup`` made; empty when they are the same."""
        from closecall.review.ledger.schema import Finding

        return [
            *(
                Finding(
                    "triggers-missing", name, f"the guard trigger {name} is missing or disabled"
                )
                for name in self.missing_triggers()
            ),
            *self.privilege_findings(),
            *self.policy_findings(),
        ]

    def require_intact(self) -> None:
        """DamagedLedger naming the first differences, unless guards, privileges and policies
        are exactly as ``ledger setup`` made them (what writers need)."""
        from closecall.review.ledger.store import DamagedLedger

        findings = self.structure_findings()
        if findings:
            shown = "; ".join(f.message for f in findings[:3])
            more = f" (and {len(findings) - 3} more)" if len(findings) > 3 else ""
            raise DamagedLedger(
                self.path,
                f"the ledger's guards were changed outside closecall: {shown}{more}",
                kind="structure",
                findings=findings,
                fix="ask the database's owner to run 'closecall ledger setup' on it again "
                "(it restores the guards, privileges and policies) and 'closecall ledger "
                "verify'; closecall will not write to it as it is",
            )

    def verify(
        self, anchor: str | None = None, keys: Mapping[str, str] | None = None
    ) -> VerifyResult:
        """Recompute the chain (and, with ``keys``, check signatures), as for the file; the
        head it reports is on disk (:meth:`wait_durable`), so an anchor never names an entry a
        crash could still take back."""
        from closecall.review.ledger.chain import verify_chain

        result = verify_chain(self, anchor, keys)
        self.wait_durable()
        return result

    def wait_durable(self, timeout: float = 5.0) -> bool:
        """Wait until the server's WAL is on disk up to where it was written when called, so
        every entry this session could read is durable (an append releases the head before
        its flush; see ``_INSERT_COMMIT_SQL``). Reads only; False if not flushed in time."""
        import time

        (written,) = self._read("SELECT pg_current_wal_insert_lsn()")[0]
        deadline = time.monotonic() + timeout
        while True:
            (done,) = self._read("SELECT pg_current_wal_flush_lsn() >= %s::pg_lsn", (written,))[0]
            if done or time.monotonic() > deadline:
                return bool(done)
            time.sleep(0.002)


def _expected_grants(reviewer: str, analyst: str) -> set[tuple[str, str, str]]:
    """(table, grantee, privilege) that setup grants to anyone but the tables' owner."""
    rw = ("SELECT", "INSERT", "UPDATE", "DELETE")
    return {
        ("meta", "PUBLIC", "SELECT"),
        ("entries", reviewer, "SELECT"),
        ("entries", reviewer, "INSERT"),
        ("entries", analyst, "SELECT"),
        ("head", reviewer, "SELECT"),
        ("head", analyst, "SELECT"),
        *(("drafts", reviewer, p) for p in rw),
        *(("claims", reviewer, p) for p in rw),
        ("claims", analyst, "SELECT"),
    }


def _expr(text: str) -> str:
    """A policy expression as PostgreSQL prints it, without case, spaces or parentheses."""
    return re.sub(r"[\s()]", "", text.lower())


#: name -> (table, command, USING, WITH CHECK, permissive, for every role) as setup makes them;
#: commands as pg_policy codes them ('*' all, 'r' SELECT).
_POLICIES = {
    "own_drafts": (
        "drafts",
        "*",
        _expr("(reviewer = SESSION_USER)"),
        _expr("(reviewer = SESSION_USER)"),
        True,
        True,
    ),
    "see_claims": ("claims", "r", "true", "", True, True),
    "own_claims": (
        "claims",
        "*",
        _expr("((reviewer = SESSION_USER) OR (expires_at <= clock_timestamp()))"),
        _expr("(reviewer = SESSION_USER)"),
        True,
        True,
    ),
}


class PgDrafts:
    """Drafts in the database: each reviewer's own (row-level security), on any host."""

    def __init__(self, ledger: PgLedger) -> None:
        self._ledger = ledger

    def _write(self, sql: str, params: Iterable[Any]) -> None:
        conn = self._ledger.connection
        try:
            conn.execute(sql.encode(), list(params))
            conn.commit()
        except BaseException:
            if not conn.closed:
                conn.rollback()
            raise

    def save(
        self, reviewer: str, case_id: str, note: str, action: str | None, reason: str | None
    ) -> Draft:
        rows = self._ledger._read("SELECT session_user, clock_timestamp()")
        user, now = str(rows[0][0]), rows[0][1]
        self._write(
            "INSERT INTO closecall.drafts (case_id, note, action, reason, updated) "
            "VALUES (%s, %s, %s, %s, %s) ON CONFLICT (reviewer, case_id) DO UPDATE SET "
            "note = excluded.note, action = excluded.action, reason = excluded.reason, "
            "updated = excluded.updated",
            (case_id, note, action, reason, now),
        )
        return Draft(user, case_id, note, action, reason, utc_iso(now))

    def load(self, reviewer: str, case_id: str) -> Draft | None:
        rows = self._ledger._read(
            "SELECT reviewer, case_id, note, action, reason, updated FROM closecall.drafts "
            "WHERE reviewer = session_user AND case_id = %s",
            (case_id,),
        )
        return _draft(rows[0]) if rows else None

    def of(self, reviewer: str) -> list[Draft]:
        rows = self._ledger._read(
            "SELECT reviewer, case_id, note, action, reason, updated FROM closecall.drafts "
            "WHERE reviewer = session_user ORDER BY updated DESC, case_id"
        )
        return [_draft(r) for r in rows]

    def drop(self, reviewer: str, case_id: str) -> None:
        self._write(
            "DELETE FROM closecall.drafts WHERE reviewer = session_user AND case_id = %s",
            (case_id,),
        )


def _draft(row: tuple[Any, ...]) -> Draft:
    return Draft(str(row[0]), str(row[1]), str(row[2]), row[3], row[4], _iso(row[5]))


def _iso(value: datetime | str) -> str:
    return value if isinstance(value, str) else utc_iso(value)


class PgClaims:
    """Soft claims in the database; they expire by the server's clock."""

    def __init__(self, ledger: PgLedger) -> None:
        self._ledger = ledger

    def take(
        self, case_id: str, reviewer: str, minutes: float, instance: str | None = None
    ) -> Claim:
        conn = self._ledger.connection
        try:
            conn.execute("DELETE FROM closecall.claims WHERE expires_at <= clock_timestamp()")
            row = conn.execute(
                "INSERT INTO closecall.claims (case_id, expires_at, instance) VALUES "
                "(%s, clock_timestamp() + make_interval(secs => %s), %s) "
                "ON CONFLICT (case_id, reviewer) DO UPDATE SET "
                "claimed_at = excluded.claimed_at, expires_at = excluded.expires_at, "
                "instance = excluded.instance "
                "RETURNING case_id, reviewer, claimed_at, expires_at",
                (case_id, float(minutes) * 60.0, instance),
            ).fetchone()
            conn.commit()
        except BaseException:
            if not conn.closed:
                conn.rollback()
            raise
        assert row is not None
        return Claim(str(row[0]), str(row[1]), _iso(row[2]), _iso(row[3]), instance)

    def release(self, case_id: str, reviewer: str, instance: str | None = None) -> None:
        conn = self._ledger.connection
        conn.execute(
            "DELETE FROM closecall.claims WHERE case_id = %s AND reviewer = session_user "
            "AND (%s::text IS NULL OR instance = %s)",
            (case_id, instance, instance),
        )
        conn.commit()

    def active(self, case_ids: Iterable[str] | None = None) -> dict[str, list[Claim]]:
        rows = self._ledger._read(
            "SELECT case_id, reviewer, claimed_at, expires_at FROM closecall.claims "
            "WHERE expires_at > clock_timestamp() ORDER BY claimed_at"
        )
        wanted = None if case_ids is None else set(case_ids)
        out: dict[str, list[Claim]] = {}
        for row in rows:
            if wanted is None or row[0] in wanted:
                out.setdefault(str(row[0]), []).append(
                    Claim(str(row[0]), str(row[1]), _iso(row[2]), _iso(row[3]))
                )
        return out


def migrate(source: PgLedger | Any, url: str) -> tuple[int, str]:
    """Copy every entry of ``source`` (an open ledger of either kind) into the empty,
    set-up PostgreSQL ledger at ``url`` in one transaction, exactly as stored (same reviewer,
    time, canonical body and hash); returns the target's (count, head hash).

    Run by the database owner (only the owner may store entries in other users' names). The
    server checks every link and hash as it copies; a non-empty target is refused.
    """
    import psycopg

    target = open_pg_ledger(url, inspect=True)
    try:
        if target.count() > 0:
            raise UserError(
                f"{target.path}: the target ledger already holds {target.count()} entries",
                "migrate into a freshly set-up, empty database (closecall ledger setup URL)",
            )
        conn = target.connection
        try:
            conn.execute("SET LOCAL closecall.copying = 'on'")
            owner = conn.execute(
                "SELECT pg_has_role(session_user, relowner, 'MEMBER') FROM pg_class "
                "WHERE oid = 'closecall.entries'::regclass"
            ).fetchone()
            if not owner or not owner[0]:
                user = conn.execute("SELECT session_user").fetchone()
                raise UserError(
                    f"{target.path}: database user '{user[0] if user else '?'}' does not own "
                    "the ledger tables, and only their owner may copy entries recorded by "
                    "other people",
                    "run 'closecall ledger migrate' as the database owner who ran "
                    "'closecall ledger setup'",
                )
            conn.execute("SELECT * FROM closecall.lock_head()")
            copied = 0
            with conn.cursor() as cur:
                batch: list[tuple[Any, ...]] = []
                for row in source.iter_rows():
                    fields = {**row, "decisions": json.loads(row["decisions"])}
                    names = _hashed_names(int(fields["format"]))
                    body = canonical_json({k: fields[k] for k in names}).decode("utf-8")
                    batch.append(
                        (
                            fields["seq"],
                            fields["case_id"],
                            fields["action"],
                            body,
                            fields["hash"],
                            fields["prev_hash"],
                        )
                    )
                    if len(batch) >= 1000:
                        cur.executemany(_COPY_SQL, batch)
                        copied += len(batch)
                        batch = []
                if batch:
                    cur.executemany(_COPY_SQL, batch)
                    copied += len(batch)
            conn.commit()
        except psycopg.Error as exc:
            conn.rollback()
            raise UserError(
                f"{target.path}: the copy was refused by the server and nothing was copied "
                f"({exc.diag.message_primary or str(exc).strip()})",
                "run 'closecall ledger verify' on the source ledger: an entry that does not "
                "hash or link as recorded cannot be copied",
            ) from None
        return target.head()[0], target.head()[1]
    finally:
        target.close()


def verify_database(
    url: str,
    anchor: str | None = None,
    *,
    allow_empty: bool = False,
    keys: Mapping[str, str] | None = None,
) -> VerifyResult:
    """Verify the PostgreSQL ledger at ``url``: guards, privileges, policies and the chain
    (see :func:`closecall.review.ledger.verify.verify_opened`). Reads only."""
    from closecall.review.ledger.verify import verify_opened

    with open_pg_ledger(url, inspect=True) as ledger:
        result = verify_opened(ledger, ledger.path, anchor, allow_empty=allow_empty, keys=keys)
        ledger.wait_durable()  # the head reported (and anchored) is on disk
        return result


#: An append's first message: the transaction, the draft's removal and the head lock (the
#: values are quoted by libpq, see :func:`_literal`).
_BEGIN_SQL = "BEGIN; SELECT * FROM closecall.lock_head_for({case})"
#: The same, for a correction: first, the case of the entry it supersedes.
_BEGIN_CHECKED_SQL = (
    "BEGIN; SELECT case_id FROM closecall.entries WHERE seq = {seq}; "
    "SELECT * FROM closecall.lock_head_for({case})"
)
_INSERT_INTO = "INSERT INTO closecall.entries (seq, case_id, action, body, hash, prev_hash) "
_INSERT_SQL = _INSERT_INTO + "VALUES (%s, %s, %s, %s, %s, %s)"
#: An append's second message: the entry, committed without waiting for the disk (which
#: releases the head at once), then a transaction that writes one small record to the WAL (a
#: transactional logical-decoding message, prefix ``closecall.durable``, which any role may
#: emit) and commits with ``synchronous_commit = on`` (the session's setting). That commit
#: returns once the WAL is on disk up to its own record, which lies after the entry's: the
#: append returns only when the entry is durable, while the next writer already holds the
#: head. (A transaction that writes no WAL of its own, e.g. one that only takes an id, commits
#: without waiting for the flush.)
_INSERT_COMMIT_SQL = (
    "SET LOCAL synchronous_commit = off; "
    + _INSERT_INTO
    + "VALUES ({seq}, {case}, {action}, {body}, {hash}, {prev}); "
    "COMMIT; SELECT pg_logical_emit_message(true, 'closecall.durable', '')"
)
_COPY_SQL = _INSERT_SQL


def _literal(conn: psycopg.Connection[Any], value: str) -> str:
    """``value`` as an SQL string literal, quoted by libpq (``PQescapeLiteral``)."""
    from psycopg import pq

    return pq.Escaping(conn.pgconn).escape_literal(value.encode("utf-8")).decode("utf-8")


def _send(conn: psycopg.Connection[Any], query: str) -> list[Any]:
    """Send ``query`` (several statements, simple query protocol) and return every result.

    An append's two messages go through libpq directly (psycopg's ``pq`` layer) rather than
    a cursor: the same protocol and quoting, less Python per append, which on a 2-core
    machine shared with the server is the rate's bound (docs/performance.md). A statement's
    error is raised as psycopg's exception for its SQLSTATE; a lost connection as
    ``psycopg.OperationalError``.
    """
    import psycopg
    from psycopg import pq

    pgconn = conn.pgconn
    with conn.lock:
        pgconn.send_query(query.encode("utf-8"))
        results = []
        while (result := pgconn.get_result()) is not None:
            results.append(result)
    for result in results:
        if result.status == pq.ExecStatus.FATAL_ERROR:
            error = psycopg.errors.error_from_result(result, encoding=conn.info.encoding)
            if pgconn.status == pq.ConnStatus.BAD:
                raise psycopg.OperationalError(str(error))
            raise error
    return results


def _load_row(conn: psycopg.Connection[Any], result: Any) -> tuple[Any, ...]:
    """The first row of ``result`` as Python values (psycopg's loaders: a timestamptz as an
    aware datetime)."""
    from psycopg.adapt import Transformer

    transformer = Transformer(conn)
    transformer.set_pgresult(result)
    return tuple(transformer.load_row(0, tuple))


def open_pg_ledger(url: str, *, readonly: bool = False, inspect: bool = False) -> PgLedger:
    """Connect to the ledger database at ``url``; refuses a URL with a password, a database
    without the ledger schema (``closecall ledger setup``), and a user without the role."""
    import psycopg

    check_url(url)
    conn = _connect(url)
    ledger = PgLedger(url, conn, readonly or inspect)
    try:
        try:
            marker = ledger._read("SELECT value FROM closecall.meta WHERE key = 'application'")
        except psycopg.errors.UndefinedTable:
            marker = []
        except psycopg.errors.InsufficientPrivilege:
            marker = [("closecall-ledger",)]
        if not marker:
            raise UserError(
                f"{ledger.path}: this database holds no closecall ledger",
                f"ask its owner to run: closecall ledger setup '{ledger.path}'",
            )
        if not inspect:
            ledger.check_access(record=not readonly)
        if not (readonly or inspect):
            ledger.require_intact()
    except BaseException:
        conn.close()
        raise
    return ledger
