"""The tables of household jobs and saved runs (SQLAlchemy 2 declarative models).

The schema is created and changed only by the migrations in ``migrations/versions`` (Alembic),
applied at start-up; these classes say how the code reads and writes it, and a test checks
that the two agree. Times are UTC, stored without a zone (every database keeps them alike).
Texts of JSON are written by orjson, so no database's JSON type is relied on. A run's input
and answer are kept once per distinct content (:class:`RunContent`, by the SHA-256 of its
bytes), so a run asked again with the same input adds only its own small row.
"""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import DateTime, ForeignKey, Integer, LargeBinary, String, Text
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship


class Base(DeclarativeBase):
    pass


class JobTable(Base):
    """One row (id 1): updating it first serialises the changes to the job table's membership
    (which job a new one replaces) across workers and instances, on any database."""

    __tablename__ = "job_table"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    generation: Mapped[int] = mapped_column(Integer, default=0)


class JobRecord(Base):
    """A household job: its specification (the JSON body that created it), its state, and its
    status document as ``GET /v1/household-jobs/{id}`` answers it (progress, summaries, skipped
    rows), written as the job runs. ``status`` and ``error`` here decide over the document's."""

    __tablename__ = "household_jobs"
    serial: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    id: Mapped[str] = mapped_column(String(32), unique=True, index=True)
    owner: Mapped[str | None] = mapped_column(String(64), index=True)
    status: Mapped[str] = mapped_column(String(32))
    error: Mapped[str | None] = mapped_column(Text)
    uploads: Mapped[int] = mapped_column(Integer, default=0)
    created: Mapped[datetime] = mapped_column(DateTime)
    updated: Mapped[datetime] = mapped_column(DateTime)
    spec: Mapped[str] = mapped_column(Text)
    document: Mapped[str] = mapped_column(Text)
    input_digest: Mapped[str] = mapped_column(String(80))
    runner: Mapped[str | None] = mapped_column(String(120))
    heartbeat: Mapped[datetime | None] = mapped_column(DateTime)


class JobResultPiece(Base):
    """A piece of a job's answer, in order: first the CSV header (``text``) with what the
    answer's writers need (``data``, JSON), then one chunk's result columns a piece (``data``,
    an Arrow IPC stream: :mod:`dualcost.api.operations.job_results`). Pieces written before
    revision 0003 are CSV text (the header, then each chunk's rows) with ``data`` null."""

    __tablename__ = "household_job_results"
    job_id: Mapped[str] = mapped_column(String(32), primary_key=True)
    piece: Mapped[int] = mapped_column(Integer, primary_key=True)
    text: Mapped[str | None] = mapped_column(Text)
    data: Mapped[bytes | None] = mapped_column(LargeBinary)


class RunContent(Base):
    """An input or an answer of saved runs, kept once: its bytes under ``sha256:<hex>`` of them.
    Removed with the last run that names it (the retention); a foreign key from each run keeps
    one from going while a run names it."""

    __tablename__ = "run_contents"
    digest: Mapped[str] = mapped_column(String(80), primary_key=True)
    data: Mapped[bytes] = mapped_column(LargeBinary)


class RunRecord(Base):
    """A saved run: what was asked (the canonical input, and the request as sent, to run it
    again), what was answered, by which version, when, and for which key (its SHA-256 only).
    The input (canonical JSON, UTF-8) and the answer (its bytes as sent) are
    :class:`RunContent` rows, named by their digests; :attr:`input` and :attr:`answer` read
    them (loaded with the run by :meth:`~dualcost.api.runs.RunStore.get`)."""

    __tablename__ = "runs"
    serial: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    id: Mapped[str] = mapped_column(String(32), unique=True, index=True)
    owner: Mapped[str | None] = mapped_column(String(64), index=True)
    operation: Mapped[str] = mapped_column(String(120), index=True)
    created: Mapped[datetime] = mapped_column(DateTime, index=True)
    version: Mapped[str] = mapped_column(String(64))
    input_digest: Mapped[str] = mapped_column(String(80), index=True)
    input_ref: Mapped[str] = mapped_column(
        ForeignKey("run_contents.digest", name="fk_runs_input_ref"), index=True)
    method: Mapped[str] = mapped_column(String(10))
    path: Mapped[str] = mapped_column(Text)
    query: Mapped[str] = mapped_column(Text)
    content_type: Mapped[str | None] = mapped_column(String(200))
    accept: Mapped[str | None] = mapped_column(Text)
    request_body: Mapped[bytes] = mapped_column(LargeBinary)
    status_code: Mapped[int] = mapped_column(Integer)
    answer_type: Mapped[str] = mapped_column(String(200))
    answer_ref: Mapped[str] = mapped_column(
        ForeignKey("run_contents.digest", name="fk_runs_answer_ref"), index=True)
    input_content: Mapped[RunContent] = relationship(foreign_keys=[input_ref], lazy="raise")
    answer_content: Mapped[RunContent] = relationship(foreign_keys=[answer_ref], lazy="raise")

    @property
    def input(self) -> str:
        """The canonical input, as text."""
        return self.input_content.data.decode()

    @property
    def answer(self) -> bytes:
        """The answer's bytes, as sent."""
        return self.answer_content.data
