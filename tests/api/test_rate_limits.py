"""Rate limits that hold: token buckets keyed by verified API keys only, every other request
by its client address; a bounded table of buckets that forgets the ones refilled (the token
bucket is common practice for request rates; a full bucket carries no state, so forgetting it
changes nothing)."""

from __future__ import annotations

from fastapi.testclient import TestClient

from dualcost.api.access import RateLimiter, client_address
from dualcost.api.app import create_app
from dualcost.config import Settings
from tests.conftest import EXAMPLES

KEY = "wrenmouth-office-key-0123456789"
OTHER = "wrenmouth-harbour-key-9876543210"


def app_with(**settings: object):
    return create_app(Settings(examples_dir=EXAMPLES, **settings))


def test_made_up_keys_share_the_bucket_of_their_address() -> None:
    """Access control off: a new made-up key on each request passes no more often than no key."""
    client = TestClient(app_with(rate_limit_per_minute=2))
    codes = [client.get("/v1/index-formulas", headers={"x-api-key": f"made-up-{i}"}).status_code
             for i in range(4)]
    assert codes == [200, 200, 429, 429]
    r = client.get("/v1/index-formulas")
    assert r.status_code == 429 and int(r.headers["retry-after"]) >= 1
    assert "client address" in r.json()["detail"]
    # Another address has its own bucket.
    elsewhere = TestClient(client.app, client=("10.0.0.7", 50000))
    assert elsewhere.get("/v1/index-formulas", headers={"x-api-key": "made-up-9"}).status_code == 200


def test_wrong_keys_are_limited_by_address_and_the_verified_key_keeps_its_own_bucket() -> None:
    """Access control on: refused keys (401) use up their address's bucket, which also bounds
    the guessing of keys; a verified key is limited on its own."""
    client = TestClient(app_with(api_keys=(KEY, OTHER), rate_limit_per_minute=2))
    codes = [client.get("/v1/index-formulas", headers={"x-api-key": f"guess-{i}"}).status_code
             for i in range(3)]
    assert codes == [401, 401, 429]
    good = [client.get("/v1/index-formulas", headers={"x-api-key": KEY}).status_code
            for _ in range(3)]
    assert good == [200, 200, 429]
    assert client.get("/v1/index-formulas", headers={"x-api-key": OTHER}).status_code == 200


def test_the_bucket_table_never_exceeds_its_bound() -> None:
    app = app_with(rate_limit_per_minute=5, rate_limit_max_clients=3)
    limiter = app.state.rate_limiter
    sizes = []
    for i in range(12):
        client = TestClient(app, client=(f"10.1.0.{i}", 40000))
        assert client.get("/v1/index-formulas",
                          headers={"x-api-key": f"made-up-{i}"}).status_code == 200
        sizes.append(len(limiter))
    assert max(sizes) == 3 and sizes[-1] == 3


def test_buckets_expire_when_they_have_filled_up_again() -> None:
    clock_value = [0.0]
    limiter = RateLimiter(per_minute=6, max_clients=100, clock=lambda: clock_value[0])
    for name in ("a", "b", "c"):
        assert limiter.take(name) == 0.0
    assert len(limiter) == 3
    clock_value[0] = 30.0
    assert limiter.take("d") == 0.0
    assert len(limiter) == 4  # a, b, c are half refilled: kept
    clock_value[0] = 61.0
    limiter.take("e")
    assert sorted(limiter.buckets) == ["d", "e"]  # a, b, c full again: forgotten


def test_the_least_recently_used_bucket_goes_when_the_table_is_full() -> None:
    limiter = RateLimiter(per_minute=2, max_clients=2, clock=lambda: 0.0)
    limiter.take("a")
    limiter.take("b")
    limiter.take("a")  # a is used again: b is now the one unused longest
    assert limiter.take("a") > 0  # a has used its two requests
    limiter.take("c")
    assert sorted(limiter.buckets) == ["a", "c"]


def test_ipv6_clients_are_limited_by_their_slash_64() -> None:
    assert client_address({"client": ("2001:db8:1:2:aaaa::1", 1)}) == "2001:db8:1:2::/64"
    assert client_address({"client": ("2001:db8:1:2:bbbb::9", 1)}) == "2001:db8:1:2::/64"
    assert client_address({"client": ("::ffff:10.0.0.5", 1)}) == "10.0.0.5"
    assert client_address({"client": ("10.0.0.5", 1)}) == "10.0.0.5"
    assert client_address({"client": None}) == "unknown"
