"""Signing as Standard Webhooks 1.0 specifies, checked against the specification's published vector."""

import base64

import pytest

from abate.domain.webhooks import new_secret, sign, signed_headers
from abate_client import WebhookSignatureError, verify_signature

# The test vector published with the Standard Webhooks specification (repository
# standard-webhooks/standard-webhooks, reference library test libraries/python/tests/test_webhooks.py,
# test_sign_function). spec/standard-webhooks.md shows signatures of this form but not their secret.
VECTOR_SECRET = "whsec_MfKQ9r8GKYqrTwjUPD8ILPZIo2LaLaSw"
VECTOR_ID = "msg_p5jXN8AQM9LWM0D4loKWxJek"
VECTOR_TIMESTAMP = 1614265330
VECTOR_BODY = '{"test": 2432232314}'
VECTOR_SIGNATURE = "v1,g0hM9SsE+OTPJTGt/tmIKtSyZlE3uFJELVlNIOLJ1OE="


def _vector_headers(signature=VECTOR_SIGNATURE, timestamp=VECTOR_TIMESTAMP):
    return {"webhook-id": VECTOR_ID, "webhook-timestamp": str(timestamp), "webhook-signature": signature}


def test_our_signature_equals_the_specifications_published_vector():
    # Standard Webhooks test vector, see VECTOR_* above.
    assert sign(VECTOR_SECRET, VECTOR_ID, VECTOR_TIMESTAMP, VECTOR_BODY) == VECTOR_SIGNATURE
    assert signed_headers(VECTOR_SECRET, VECTOR_ID, VECTOR_TIMESTAMP, VECTOR_BODY) == _vector_headers()


def test_the_client_helper_accepts_the_published_vector_with_or_without_the_prefix():
    # Standard Webhooks test vector, see VECTOR_* above.
    for secret in (VECTOR_SECRET, VECTOR_SECRET.removeprefix("whsec_")):
        payload = verify_signature(secret, _vector_headers(), VECTOR_BODY.encode(), now=VECTOR_TIMESTAMP)
        assert payload == {"test": 2432232314}


def test_the_client_helper_accepts_one_matching_signature_among_several():
    # Standard Webhooks 1.0, "Webhook headers": the header is a space-delimited list during key rotation.
    other = sign(new_secret(), VECTOR_ID, VECTOR_TIMESTAMP, VECTOR_BODY)
    headers = _vector_headers(f"{other} {VECTOR_SIGNATURE}")
    assert verify_signature(VECTOR_SECRET, headers, VECTOR_BODY, now=VECTOR_TIMESTAMP) == {"test": 2432232314}


@pytest.mark.parametrize(
    ("body", "headers", "now", "reason"),
    [
        ('{"test": 2432232315}', _vector_headers(), VECTOR_TIMESTAMP, "no webhook-signature matches"),
        (VECTOR_BODY, _vector_headers(timestamp=VECTOR_TIMESTAMP + 1), VECTOR_TIMESTAMP, "no webhook-signature"),
        (VECTOR_BODY, _vector_headers(), VECTOR_TIMESTAMP + 301, "more than 300 s from now"),
        (VECTOR_BODY, _vector_headers(), VECTOR_TIMESTAMP - 301, "more than 300 s from now"),
        (VECTOR_BODY, {"webhook-id": VECTOR_ID}, VECTOR_TIMESTAMP, "webhook-timestamp header is missing"),
        (VECTOR_BODY, _vector_headers(timestamp="yesterday"), VECTOR_TIMESTAMP, "is not a Unix time"),
    ],
    ids=["altered body", "altered timestamp", "too late", "too early", "no timestamp", "bad timestamp"],
)
def test_the_client_helper_refuses_a_tampered_stale_or_incomplete_delivery(body, headers, now, reason):
    with pytest.raises(WebhookSignatureError, match=reason):
        verify_signature(VECTOR_SECRET, headers, body, now=now)


def test_the_client_helper_refuses_a_signature_made_with_another_secret():
    forged = sign(new_secret(), VECTOR_ID, VECTOR_TIMESTAMP, VECTOR_BODY)
    with pytest.raises(WebhookSignatureError, match="no webhook-signature matches"):
        verify_signature(VECTOR_SECRET, _vector_headers(forged), VECTOR_BODY, now=VECTOR_TIMESTAMP)


def test_a_new_secret_is_whsec_and_the_base64_of_at_least_24_random_bytes():
    # Standard Webhooks 1.0, "Signature scheme": symmetric secrets are random, 24 to 64 bytes, base64, whsec_.
    secrets = {new_secret() for _ in range(20)}
    assert len(secrets) == 20
    for secret in secrets:
        assert secret.startswith("whsec_")
        assert 24 <= len(base64.b64decode(secret.removeprefix("whsec_"), validate=True)) <= 64
