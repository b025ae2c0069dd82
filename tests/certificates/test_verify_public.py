"""Issue 15: /verify tells the holder of a certificate everything, a guesser nothing.

A number alone answers only whether it exists; a number with a wrong code answers like
a number that does not exist; the number with its code (or the uploaded file) shows the
state and the first lines. The identification values looked for in the answers are the
job's own (customer, rotor part number, serial), read from the database.
"""

from __future__ import annotations

import html
import io
import re

import pytest

from shopapp.certificates import issue as certificates
from shopapp.certificates.routes import MAX_UPLOAD_BYTES
from tests.certificates.signed import (
    flip_byte_in_title,
    issue_before_signing,
    issue_signed,
)


@pytest.fixture()
def cert(app, db, shop, make_user):  # type: ignore[no-untyped-def]
    return issue_signed(app, db, shop, make_user("operator"), make_user("quality"))


def _secrets(cert) -> tuple[str, ...]:  # type: ignore[no-untyped-def]
    job = cert.job
    return (job.customer.name, job.rotor.serial_number, job.rotor.rotor_type.part_number)


def _answer(page: str) -> str:
    """The result card only (the form echoes what was typed)."""
    m = re.search(r'<section class="card" aria-live="polite">(.*?)</section>', page, re.S)
    assert m, page
    return m.group(1)


def _get(client, **args: str) -> tuple[int, str]:  # type: ignore[no-untyped-def]
    resp = client.get("/verify", query_string=args)
    return resp.status_code, html.unescape(resp.get_data(as_text=True))


def test_a_number_alone_reveals_no_customer_rotor_or_serial(client, cert) -> None:
    status, page = _get(client, n=cert.number)
    assert status == 200
    assert f"A certificate numbered {cert.number} is in this shop's register" in page
    for value in _secrets(cert):
        assert value not in page
    assert "Genuine" not in _answer(page)  # not even its state
    assert "revision" not in _answer(page).split("to see whether")[0]
    _, unknown = _get(client, n="BC-1999-00001")
    assert "No certificate matches" in unknown


def test_a_wrong_code_reveals_nothing(client, cert) -> None:
    wrong = "A" * 10 if cert.verification_code != "A" * 10 else "B" * 10
    _, page = _get(client, n=cert.number, c=wrong)
    for value in _secrets(cert):
        assert value not in page
    # The same answer as for a number that does not exist.
    _, nobody = _get(client, n="BC-1999-00001", c=wrong)
    assert _answer(page) == _answer(nobody)
    assert "No certificate matches this number and code" in _answer(page)
    # Another certificate's code does not open this one either.
    _, other = _get(client, n="BC-1999-00001", c=cert.verification_code)
    assert "No certificate matches this number and code" in _answer(other)


def test_the_number_with_its_code_shows_state_and_details(client, cert) -> None:
    status, page = _get(client, n=cert.number.lower(), c=cert.verification_code.lower())
    assert status == 200
    answer = _answer(page)
    assert "Genuine and valid" in answer and f"{cert.number} revision 1 is valid" in answer
    for value in _secrets(cert):
        assert value in answer


def test_the_printed_url_is_what_verify_answers(client, cert) -> None:
    data = certificates.certificate_data(cert)
    path = data.verify_url.removeprefix("https://balancing.example.test")
    resp = client.get(path)
    assert "Genuine and valid" in _answer(resp.get_data(as_text=True))


def test_superseded_and_void_with_the_code(client, app, db, cert, make_user) -> None:
    quality = make_user("quality")
    second = certificates.reissue(db, cert, by=quality, reason="order reference corrected")
    db.commit()
    _, page = _get(client, n=cert.number, c=cert.verification_code)
    assert "Genuine, superseded" in page and "superseded by revision 2" in page
    certificates.void(db, second, by=quality, reason="rotor scrapped by the customer")
    db.commit()
    _, page = _get(client, n=cert.number, c=second.verification_code)
    assert "Genuine, void" in page and "rotor scrapped by the customer" in page


def test_a_voided_revision_shows_its_reason_though_a_later_one_exists(
        client, db, cert, make_user) -> None:
    # Before: "superseded by revision 2" for a revision voided on its own and issued again.
    quality = make_user("quality")
    certificates.void(db, cert, by=quality, reason="rotor serial misread")
    certificates.issue(db, cert.job, by=quality)
    db.commit()
    _, page = _get(client, n=cert.number, c=cert.verification_code)
    assert "Genuine, void" in page and "rotor serial misread" in page
    assert "superseded" not in page


def test_bad_input_names_the_field_never_a_500(client, cert) -> None:
    status, page = _get(client, n="", c=cert.verification_code)
    assert status == 422 and "enter the certificate number" in page
    status, page = _get(client, n=cert.number, c="not-a-code!")
    # The walk: "Verification code a verification code has 10 characters ..." (the label
    # put before a message that named the field itself).
    assert status == 422 and ("Verification code must be the 10 characters printed on the "
                              "certificate (letters A-Z and digits 2-7), or at least the "
                              "first 16 hex digits of its content hash") in page
    status, page = _get(client, n="X" * 41)
    assert status == 422


def test_a_certificate_from_before_the_codes_verifies_by_number_and_hash(
        client, db, shop, make_user) -> None:
    old = issue_before_signing(db, shop, make_user("operator"), make_user("quality"))
    _, page = _get(client, n=old.number, c=old.data_sha256[:16])  # as its footer prints it
    assert "Genuine and valid" in _answer(page)
    _, page = _get(client, q=old.data_sha256)  # the older search box with the full hash
    assert "Genuine and valid" in _answer(page)


def test_the_rate_limit_answers_429_with_retry_after(app, client) -> None:
    limit = app.extensions["shopapp.verify_limit"].limit
    assert limit == 30
    for _ in range(limit):
        assert client.get("/verify", query_string={"n": "BC-1999-00001"}).status_code == 200
    resp = client.get("/verify", query_string={"n": "BC-1999-00001"})
    assert resp.status_code == 429
    assert 1 <= int(resp.headers["Retry-After"]) <= 60
    assert "Too many checks" in resp.get_data(as_text=True)
    # Counted per client address: another address still gets its answer.
    other = client.get("/verify", environ_base={"REMOTE_ADDR": "192.0.2.7"})
    assert other.status_code == 200


def _upload(client, data: bytes, **kw):  # type: ignore[no-untyped-def]
    client.refresh_csrf("/verify")
    return client.post("/verify", data={"file": (io.BytesIO(data), "c.pdf")},
                       content_type="multipart/form-data", **kw)


def test_an_uploaded_certificate_shows_its_details_and_signature(client, cert) -> None:
    resp = _upload(client, cert.pdf)
    assert resp.status_code == 200
    answer = html.unescape(_answer(resp.get_data(as_text=True)))
    assert "Genuine and valid" in answer
    for value in _secrets(cert):
        assert value in answer
    assert "signed by CN=" in answer and "intact" in answer
    assert "the shop's current signing key" in answer


def test_an_altered_upload_is_unknown_and_its_signature_broken(client, cert) -> None:
    resp = _upload(client, flip_byte_in_title(cert.pdf))
    answer = _answer(resp.get_data(as_text=True))
    assert "Not found" in answer and "NOT intact" in answer
    for value in _secrets(cert):
        assert value not in answer


def test_an_upload_without_csrf_token_is_refused(client, cert) -> None:
    resp = client.post("/verify", data={"file": (io.BytesIO(cert.pdf), "c.pdf")},
                       content_type="multipart/form-data", csrf=False)
    assert resp.status_code == 400


def test_an_upload_over_the_cap_is_refused_with_413(client) -> None:
    from werkzeug.test import EnvironBuilder

    big = b"%PDF-1.4\n" + b"0" * (MAX_UPLOAD_BYTES + 100_000)
    token = client.refresh_csrf("/verify")
    # The builder spools a body this large to a temporary file: closed here, not leaked.
    builder = EnvironBuilder(path="/verify", method="POST", data={
        "csrf_token": token, "file": (io.BytesIO(big), "c.pdf")})
    environ = builder.get_environ()
    try:
        resp = client.open(environ)
    finally:
        environ["wsgi.input"].close()
        builder.close()
    assert resp.status_code == 413
    assert "larger than 20 MB" in resp.get_data(as_text=True)


def test_garbage_upload_is_a_message_not_a_500(client) -> None:
    resp = _upload(client, b"this is not a pdf at all")
    assert resp.status_code == 200
    assert "not a readable PDF file" in resp.get_data(as_text=True)
