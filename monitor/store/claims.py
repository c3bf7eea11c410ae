"""Rounds and claims: how several workers share one night without a coordinator.

A nightly run *joins* the night's open round (or opens the next one: ``seq`` 1, 2, ... per
night, unique, so two workers opening at once end up in the same round) and adds a claim row
for every model not yet in it. A worker then *takes* one open claim at a time: a row that is
unheld, or whose holder's expiry has passed, picked with ``FOR UPDATE SKIP LOCKED`` so that on
PostgreSQL concurrent workers skip each other's candidate rows instead of queueing on them (on
SQLite the write lock of ``BEGIN IMMEDIATE`` serialises the take). The holder's heartbeat
renews its expiry; a worker killed mid-model leaves a claim that expires and is taken over
(at once by a worker on the same host, which sees the holder's process is gone). When no
claim is unfinished, the first worker to *wrap* the round (a conditional update: one winner)
composes the night's digest, prunes and writes the team page.

Correctness does not rest on the claims: a model's check starts from its stored checks and is
serialised per model (``store.model_lock``), so a model taken over after its holder did commit
finds nothing left to check. The claims spread the work and say when the night is done.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, datetime, timedelta
from typing import Any

from sqlalchemy import Connection, Engine, Integer, and_, func, insert, literal, or_, select, update
from sqlalchemy.exc import IntegrityError
from sqlalchemy.sql import Select

from monitor.store.engine import write_transaction
from monitor.store.schema import models, night_claims, night_rounds
from monitor.store.upsert import insert_for

KEEP_ROUNDS = timedelta(days=35)  # rounds (and their claims) older than this are forgotten


@dataclass(frozen=True)
class Claim:
    round_id: int
    model_id: int
    model: str  # the model's name
    takes: int  # 1: first take; more: taken over from a worker that stopped renewing


@dataclass(frozen=True)
class Progress:
    """Where a round stands."""

    models: int
    done: int
    held: int  # taken and unfinished, holder within its expiry
    holders: tuple[str, ...]  # the holders of unfinished claims
    wrapped: bool
    wrap_holder: str | None

    @property
    def unfinished(self) -> int:
        return self.models - self.done


def join_round(engine: Engine, through: date, holder: str, now: datetime) -> int:
    """The id of ``through``'s open round (opened now if there is none), with a claim for
    every model; a round already wrapped is closed, so a later run opens the next one."""
    r = night_rounds.c
    for _ in range(5):  # another worker may open the same round between our read and insert
        try:
            with write_transaction(engine) as conn:
                row = conn.execute(select(r.id, r.seq, r.wrapped_at).where(r.through == through)
                                   .order_by(r.seq.desc()).limit(1)).first()
                if row is not None and row.wrapped_at is None:
                    round_id = int(row.id)
                else:
                    seq = 1 if row is None else int(row.seq) + 1
                    round_id = int(conn.execute(insert(night_rounds).values(
                        through=through, seq=seq, opened_at=now, opened_by=holder)
                        .returning(r.id)).scalar_one())
                _add_models(conn, round_id)
                return round_id
        except IntegrityError:
            continue
    raise RuntimeError(f"could not join a round for the night through {through}")


def _add_models(conn: Connection, round_id: int) -> None:
    c = night_claims.c
    present = select(c.model_id).where(c.round_id == round_id)
    conn.execute(insert_for(conn, night_claims).from_select(
        ["round_id", "model_id", "takes"],
        select(literal(round_id, Integer), models.c.id, literal(0, Integer))
        .where(models.c.id.not_in(present))).on_conflict_do_nothing())


def take(engine: Engine, round_id: int, holder: str, now: datetime, ttl: timedelta, *,
         done: tuple[Claim, str] | None = None) -> Claim | None:
    """Take one unfinished claim that nobody holds (or whose holder's expiry passed); None
    when there is none to take. ``done``: our previous claim and its outcome, marked done in
    the same transaction (one round trip less per model)."""
    c = night_claims.c
    with write_transaction(engine) as conn:
        _no_wait_for_disk(conn)
        if done is not None:
            _finish(conn, *done, holder, now)
        row = conn.execute(next_claim(round_id, now)).first()
        if row is None:
            return None
        takes = int(row.takes) + 1
        conn.execute(update(night_claims)
                     .where(c.round_id == round_id, c.model_id == row.model_id)
                     .values(holder=holder, claimed_at=now, expires_at=now + ttl, takes=takes))
    return Claim(round_id, int(row.model_id), str(row.name), takes)


def _no_wait_for_disk(conn: Connection) -> None:
    """A claim's commit need not wait for the server's log to reach the disk: a claim lost in
    a server crash is taken again, and a model's check (durable on its own) then finds nothing
    left to do. It saves a log flush per model (PostgreSQL ``synchronous_commit``, for this
    transaction only)."""
    if conn.dialect.name == "postgresql":
        conn.exec_driver_sql("SET LOCAL synchronous_commit = off")


def next_claim(round_id: int, now: datetime) -> Select[Any]:
    """The query that picks the next claim to take: the lowest model id among the unfinished
    claims nobody holds (or whose expiry passed), skipping rows other workers are taking
    (``ix_night_claims_open`` serves it)."""
    c = night_claims.c
    free = or_(c.holder.is_(None), c.expires_at.is_(None), c.expires_at <= now)
    return (select(c.model_id, c.takes, models.c.name)
            .join(models, models.c.id == c.model_id)
            .where(c.round_id == round_id, c.done_at.is_(None), free)
            .order_by(c.model_id).limit(1)
            .with_for_update(of=night_claims, skip_locked=True))


def finish(engine: Engine, claim: Claim, holder: str, now: datetime, outcome: str) -> bool:
    """Mark our claim done; False when it was no longer ours (it expired and was taken over:
    the other worker then checks what is left, which may be nothing)."""
    with write_transaction(engine) as conn:
        return _finish(conn, claim, outcome, holder, now)


def _finish(conn: Connection, claim: Claim, outcome: str, holder: str, now: datetime) -> bool:
    c = night_claims.c
    done = conn.execute(update(night_claims).where(
        c.round_id == claim.round_id, c.model_id == claim.model_id, c.holder == holder,
        c.done_at.is_(None)).values(done_at=now, outcome=outcome))
    return done.rowcount == 1


def renew(engine: Engine, holder: str, now: datetime, ttl: timedelta) -> int:
    """Heartbeat: extend the expiry of every unfinished claim and wrap-up we hold."""
    c, r = night_claims.c, night_rounds.c
    with write_transaction(engine) as conn:
        held = conn.execute(update(night_claims).where(c.holder == holder, c.done_at.is_(None))
                            .values(expires_at=now + ttl)).rowcount
        held += conn.execute(update(night_rounds).where(r.wrap_holder == holder,
                                                        r.wrapped_at.is_(None))
                             .values(wrap_expires_at=now + ttl)).rowcount
    return int(held)


def release_holder(engine: Engine, round_id: int, gone: str) -> int:
    """Free the unfinished claims of ``gone`` (a holder known to be dead) for others to take."""
    c = night_claims.c
    with write_transaction(engine) as conn:
        return int(conn.execute(update(night_claims).where(
            c.round_id == round_id, c.holder == gone, c.done_at.is_(None))
            .values(expires_at=None)).rowcount)


def progress(engine: Engine, round_id: int, now: datetime) -> Progress:
    c, r = night_claims.c, night_rounds.c
    with engine.connect() as conn:
        total, done, held = conn.execute(select(
            func.count(),
            func.count(c.done_at),
            func.count().filter(and_(c.done_at.is_(None), c.holder.is_not(None),
                                     c.expires_at > now)),
        ).where(c.round_id == round_id)).one()
        holders = tuple(sorted(h for (h,) in conn.execute(
            select(c.holder).distinct().where(c.round_id == round_id, c.done_at.is_(None),
                                              c.holder.is_not(None)))))
        wrapped_at, wrap_holder = conn.execute(
            select(r.wrapped_at, r.wrap_holder).where(r.id == round_id)).one()
    return Progress(int(total), int(done), int(held or 0), holders, wrapped_at is not None,
                    wrap_holder)


def try_wrap(engine: Engine, round_id: int, holder: str, now: datetime,
             ttl: timedelta) -> bool:
    """Become the round's one wrapper, if every claim is done and nobody (alive) wraps it."""
    c, r = night_claims.c, night_rounds.c
    unfinished = select(c.model_id).where(c.round_id == round_id, c.done_at.is_(None))
    with write_transaction(engine) as conn:
        won = conn.execute(update(night_rounds).where(
            r.id == round_id, r.wrapped_at.is_(None),
            or_(r.wrap_holder.is_(None), r.wrap_expires_at.is_(None), r.wrap_expires_at <= now,
                r.wrap_holder == holder),
            ~unfinished.exists()).values(wrap_holder=holder, wrap_expires_at=now + ttl))
        return won.rowcount == 1


def release_wrap(engine: Engine, round_id: int, gone: str) -> None:
    """Let another worker wrap the round that ``gone`` (known dead) began to wrap."""
    r = night_rounds.c
    with write_transaction(engine) as conn:
        conn.execute(update(night_rounds).where(r.id == round_id, r.wrap_holder == gone,
                                                r.wrapped_at.is_(None))
                     .values(wrap_expires_at=None))


def wrapped(engine: Engine, round_id: int, holder: str, now: datetime) -> None:
    """The round is done: its digest is queued; later runs of the night open a new round.
    Rounds older than :data:`KEEP_ROUNDS` are forgotten here (their claims with them)."""
    r = night_rounds.c
    with write_transaction(engine) as conn:
        conn.execute(update(night_rounds).where(r.id == round_id, r.wrap_holder == holder)
                     .values(wrapped_at=now))
        through = conn.execute(select(r.through).where(r.id == round_id)).scalar_one()
        old = select(r.id).where(r.through < through - KEEP_ROUNDS)
        conn.execute(night_claims.delete().where(night_claims.c.round_id.in_(old)))
        conn.execute(night_rounds.delete().where(r.through < through - KEEP_ROUNDS))
