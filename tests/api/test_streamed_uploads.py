"""A CSV household upload computed while it arrives (dualcost.api.operations.job_intake): the
answer is the same bytes as the answer of the same upload read after it has arrived; a quote
that comes after the first blocks sends the whole upload back to the reference reader (Python's
``csv`` module, RFC 4180 quoting) with the same answer as an upload never streamed; the job
takes its slot at its first block and a stall after that is ended by the body's read time
(408), which leaves the job waiting; the memory held while an upload of many blocks is computed
is bounded by the blocks, not the file (measured with the standard library's tracemalloc and
pyarrow's own memory pool)."""

from __future__ import annotations

import threading
import time
import tracemalloc
from collections.abc import Iterator
from typing import Any

import httpx
import pyarrow as pa
import pytest

from dualcost.api.inputs.columnar import BLOCK_BYTES, UploadScan
from dualcost.api.inputs.csv import DeclaredDialect
from dualcost.api.operations import job_intake, jobs
from dualcost.config import Settings
from tests.api.test_households import example, household_csv
from tests.api.test_transport import connect, create_job, read_all, status, upload_head, wait_for
from tests.conftest import EXAMPLES, running_service


@pytest.fixture(scope="module")
def service() -> Iterator[str]:
    """Two seconds to read a body, plus one for every 10 MB received."""
    with running_service(Settings(examples_dir=EXAMPLES, read_timeout_seconds=2.0,
                                  read_min_bytes_per_second=10_000_000,
                                  max_body_bytes=200_000_000)) as url:
        yield url


def upload_of(blocks: float, tail: bytes = b"") -> bytes:
    """The example's households repeated over ``blocks`` of pyarrow's reading, then ``tail``."""
    lines = household_csv(example()).encode().split(b"\r\n")
    rows = b"\r\n".join(lines[1:-1]) + b"\r\n"
    return lines[0] + b"\r\n" + rows * int(blocks * BLOCK_BYTES / len(rows) + 1) + tail


def pieces(body: bytes, size: int = 1 << 20, pause: float = 0.02) -> Iterator[bytes]:
    """The body over time: a piece, then a pause."""
    for i in range(0, len(body), size):
        yield body[i:i + size]
        time.sleep(pause)


def answers(url: str, body: bytes, monkeypatch: pytest.MonkeyPatch) -> tuple[bytes, bytes]:
    """The answer to ``body`` sent over time (computed while it arrives) and to the same body
    read after it has arrived (the service's path before streaming), each to a new job."""
    with httpx.Client(timeout=60) as client:
        job = create_job(url, client)
        streamed = client.post(url + job["links"]["households"], content=pieces(body),
                               headers={"content-type": "text/csv"})
        assert streamed.status_code == 200, streamed.text[:500]
        done = client.get(url + job["links"]["self"]).json()
        assert done["status"] == "done" and done["progress"]["rows_total"] == body.count(b"\n") - 1
        monkeypatch.setattr(job_intake, "streams", lambda *args: False)
        job = create_job(url, client)
        spooled = client.post(url + job["links"]["households"], content=body,
                              headers={"content-type": "text/csv"})
        assert spooled.status_code == 200, spooled.text[:500]
    return streamed.content, spooled.content


def test_an_upload_computed_while_it_arrives_answers_the_same_bytes(
        service: str, monkeypatch: pytest.MonkeyPatch) -> None:
    """Three blocks and a half, sent a mebibyte at a time: the same answer, byte for byte, as
    the same upload read once it has arrived."""
    streamed, spooled = answers(service, upload_of(3.5), monkeypatch)
    assert streamed == spooled
    assert streamed.count(b"\n") > 100_000


def test_a_quote_after_the_first_blocks_sends_the_upload_to_the_reference_reader(
        service: str, monkeypatch: pytest.MonkeyPatch) -> None:
    """A quoted household id at the end (RFC 4180): what pyarrow computed of the first
    blocks is discarded and the upload read from its start by the reference reader, which
    reads the quote; the same answer as the upload never streamed, the id unquoted."""
    tail = b'"late one",harbour,980.0,1310.0,0.11,0.21,0.38,0.08,0.09,0.08,0.05\r\n'
    streamed, spooled = answers(service, upload_of(2.5, tail), monkeypatch)
    assert streamed == spooled
    assert b"late one" in streamed and b'"late one"' not in streamed


def test_a_bad_cell_after_the_first_blocks_is_named_by_its_row(
        service: str, monkeypatch: pytest.MonkeyPatch) -> None:
    """An empty share late in the upload: the row is skipped and named as before."""
    tail = b"late,harbour,980.0,1310.0,,0.21,0.38,0.08,0.09,0.08,0.05\r\n"
    body = upload_of(2.5, tail)
    streamed, spooled = answers(service, body, monkeypatch)
    assert streamed == spooled


def test_the_job_takes_its_slot_at_its_first_block_and_a_stall_then_is_ended_408(
        service: str) -> None:
    """Three blocks sent, then nothing: the job runs (its first block is computed) while the
    upload is on its way, and /live answers; the body's read time ends the request (408) and
    the job waits again, nothing kept. (Before its first block, a stalled upload holds no slot:
    test_transport.py.)"""
    body = upload_of(3)
    job = create_job(service)
    url = service + job["links"]["self"]
    with connect(service) as sock:
        sock.sendall(upload_head(job["links"]["households"], 2 * len(body)) + body)
        wait_for(lambda: httpx.get(url).json()["status"] == "running", 10.0)
        wait_for(lambda: httpx.get(url).json()["progress"]["households_done"] > 0, 10.0)
        # The computing is off the event loop: the probe answers meanwhile.
        assert httpx.get(service + "/live", timeout=1.0).status_code == 200
        answer = read_all(sock)
    assert status(answer) == 408, answer[:300]
    wait_for(lambda: httpx.get(url).json()["status"] == "waiting_for_households", 5.0)
    document = httpx.get(url).json()
    assert document["progress"]["households_done"] == 0


class _Store:
    """A job store that keeps nothing (the memory measured is the reading and computing)."""

    def claim(self, state: Any) -> None:
        state.status = "running"

    def progress(self, state: Any, pieces: Any = ()) -> None:
        state.pieces += len(pieces)


def measured(blocks: int) -> tuple[int, int, int, int]:
    """An upload of ``blocks`` fed a mebibyte at a time to the reading that computes while it
    arrives (no database: :class:`_Store`): tracemalloc's memory held at the end and at its
    peak, pyarrow's pool at its peak (sampled: its own peak counts the whole process), and
    the households computed."""
    settings = Settings(examples_dir=EXAMPLES)
    spec = jobs.HouseholdJobSpec.model_validate(
        {k: v for k, v in example().items() if k != "households"})
    state = jobs.state_of(spec, settings)
    store = _Store()
    state.store = store  # type: ignore[assignment]
    body = upload_of(blocks)
    file = job_intake.spool_file()
    source = job_intake.Growing(file)
    scan = UploadScan()
    upload = jobs.Upload(file, 0, "", 0, False, scan)
    failed: list[BaseException] = []

    def run() -> None:
        try:
            job_intake.compute(state, upload, source, store,  # type: ignore[arg-type]
                               DeclaredDialect(), settings)
        except BaseException as exc:  # noqa: BLE001  (told to the test)
            failed.append(exc)

    pool = pa.default_memory_pool()
    arrow_peak = [0]

    def sampled() -> None:
        while worker.is_alive():
            arrow_peak[0] = max(arrow_peak[0], pool.bytes_allocated())
            time.sleep(0.002)

    tracemalloc.start()
    try:
        worker = threading.Thread(target=run)
        worker.start()
        sampler = threading.Thread(target=sampled)
        sampler.start()
        for piece in pieces(body, pause=0.0):
            scan.feed(piece)
            file.write(piece)
            source.wrote(len(piece))
        source.end()
        worker.join(120)
        sampler.join()
        held, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
        file.close()
    assert not failed, failed
    assert state.acc.households == body.count(b"\n") - 1
    return held, peak, arrow_peak[0], state.acc.households


def test_memory_is_bounded_by_the_blocks_not_the_upload() -> None:
    """Uploads of 5 and of 20 blocks (21 and 84 MB): beyond what the job keeps for its
    summaries (a few numbers per household, which the quantiles need all of: tracemalloc's
    memory still held at the end), the Python memory at its peak (tracemalloc counts numpy's
    arrays) stays under three blocks; pyarrow's pool at its peak (its reading ahead and
    parsing: some eight to ten blocks here) is the same, within two blocks, for both uploads
    and a fraction of the larger; a chunk's results are dropped once stored."""
    small, large = measured(5), measured(20)
    for held, peak, _, households in (small, large):
        assert held < 100 * households, (held, households)  # the summaries' columns
        assert peak - held < 3 * BLOCK_BYTES, (peak, held)
    assert 0 < large[2] < small[2] + 2 * BLOCK_BYTES, (small[2], large[2])
    assert large[2] < 0.6 * len(upload_of(20)), large[2]
