"""Customer pages: list, search, create, edit, archive, detail; roles, bad input, query counts."""

from __future__ import annotations

import html

import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from shopapp.models import AuditEvent, Customer
from tests.registry.edits import drawn_stamp

ROLES = ("operator", "quality", "owner", "admin")


def _count(db: Session, model: type = Customer) -> int:
    return db.scalar(select(func.count()).select_from(model)) or 0


@pytest.mark.parametrize("role", ROLES)
def test_list_and_detail_render_for_every_role(client, login_as, shop, role):
    customer = shop.customer(name="Kestrel Mills")
    shop.job(shop.rotor(shop.rotor_type(customer)))
    login_as(role)
    page = client.get("/customers/")
    assert page.status_code == 200 and "Kestrel Mills" in page.get_data(as_text=True)
    detail = client.get(f"/customers/{customer.id}")
    assert detail.status_code == 200
    text = detail.get_data(as_text=True)
    assert "Kestrel Mills" in text and "booked in" in text
    # Only roles that may edit the registry see the edit button.
    assert ("/edit" in text) == (role != "owner")


def test_anonymous_is_sent_to_log_in(client):
    resp = client.get("/customers/")
    assert resp.status_code == 302 and "/login" in resp.headers["Location"]


def test_owner_may_not_create_or_archive(client, login_as, shop, db):
    customer = shop.customer()
    db.commit()
    login_as("owner")
    assert client.get("/customers/new").status_code == 403
    before = _count(db)
    assert client.post("/customers/new", data={"name": "Sneaky Ltd"}).status_code == 403
    assert client.post(f"/customers/{customer.id}/archive").status_code == 403
    assert _count(db) == before
    db.refresh(customer)
    assert not customer.archived


def test_operator_creates_a_customer_with_an_audit_event(client, login_as, db):
    login_as("operator")
    resp = client.post(
        "/customers/new",
        data={"name": "Larkspur Fans", "contact": "J. Birch", "email": "jb@example.org",
              "requires_residual_test": "y"},
    )
    assert resp.status_code == 302
    customer = db.scalars(select(Customer).where(Customer.name == "Larkspur Fans")).one()
    assert customer.requires_residual_test
    events = db.scalars(
        select(AuditEvent).where(
            AuditEvent.entity == "customer", AuditEvent.entity_id == customer.id
        )
    ).all()
    assert [e.action for e in events] == ["create"]


@pytest.mark.parametrize(
    ("data", "message"),
    [
        ({"name": ""}, "Give the customer"),
        ({"name": "   "}, "required"),
        ({"name": "x" * 201}, "200"),
        ({"name": "Fine Name", "email": "no-at-sign"}, "not an e-mail address"),
        ({"name": "Fine Name", "phone": "9" * 65}, "64"),
        ({"name": "Fine Name", "notes": "n" * 5001}, "5000"),
    ],
)
def test_bad_customer_input_is_422_with_message_and_nothing_saved(
    client, login_as, db, data, message
):
    login_as("operator")
    before = (_count(db), _count(db, AuditEvent))
    resp = client.post("/customers/new", data=data)
    assert resp.status_code == 422
    assert message in resp.get_data(as_text=True)
    assert (_count(db), _count(db, AuditEvent)) == before


def test_duplicate_name_on_edit_is_422(client, login_as, shop, db):
    shop.customer(name="Alder Works")
    other = shop.customer(name="Birch Works")
    db.commit()
    login_as("quality")
    resp = client.post(f"/customers/{other.id}/edit", data={"name": "ALDER WORKS"})
    assert resp.status_code == 422
    page = html.unescape(resp.get_data(as_text=True))
    # Before: the label was put in front of a clause: "Name a customer called ... exists".
    assert "A customer called 'Alder Works' already exists." in page
    assert "Name a customer" not in page
    db.refresh(other)
    assert other.name == "Birch Works"


def test_edit_page_is_prefilled_and_saves(client, login_as, shop, db):
    customer = shop.customer(name="Cedar Rolls", contact="P. Fern")
    db.commit()
    login_as("admin")
    page = client.get(f"/customers/{customer.id}/edit").get_data(as_text=True)
    assert 'value="P. Fern"' in page
    data = {"name": "Cedar Rolls", "contact": "Q"}
    resp = client.post(f"/customers/{customer.id}/edit", data=data)
    assert resp.status_code == 302
    db.refresh(customer)
    assert customer.contact == "Q"


def test_two_people_editing_one_customer_lose_nothing(client, login_as, make_user, shop, db):
    # The walk: two people opened the same customer's edit form; one changed the contact,
    # the other the phone; both read "Customer saved." and the second save put the old
    # phone (or contact) back: a change was lost without a word.
    from shopapp.registry import customers

    customer = shop.customer(name="Elm Fans", contact="A. Ash", phone="100")
    other = make_user("operator")
    db.commit()
    login_as("operator")
    page = client.get(f"/customers/{customer.id}/edit").get_data(as_text=True)
    drawn = drawn_stamp(page)
    # Someone else saves the phone meanwhile.
    customers.update_customer(db, customer, by=other, phone="555-0199")
    db.commit()
    mine = {"name": "Elm Fans", "contact": "B. Birch", "phone": "100", "drawn": drawn}
    resp = client.post(f"/customers/{customer.id}/edit", data=mine)
    assert resp.status_code == 422
    body = html.unescape(resp.get_data(as_text=True))
    assert ("customer: saved by someone else since you opened this form (phone changed); "
            "nothing of yours was saved") in body
    db.refresh(customer)
    assert (customer.contact, customer.phone) == ("A. Ash", "555-0199")
    # The form drawn again holds what was typed and the stamp of the record as it is now:
    # saving it again is a decision taken knowing the other change.
    assert 'value="B. Birch"' in body
    again = client.post(f"/customers/{customer.id}/edit",
                        data=mine | {"phone": "555-0199", "drawn": drawn_stamp(body)})
    assert again.status_code == 302
    db.refresh(customer)
    assert (customer.contact, customer.phone) == ("B. Birch", "555-0199")


def test_post_without_csrf_token_is_refused(client, login_as, db):
    login_as("operator")
    before = _count(db)
    resp = client.post("/customers/new", data={"name": "No Token Ltd"}, csrf=False)
    assert resp.status_code == 400
    assert _count(db) == before


def test_archive_hides_from_default_list_and_toggle_shows_it(client, login_as, shop, db):
    customer = shop.customer(name="Dogwood Pumps")
    db.commit()
    login_as("operator")
    row = "Dogwood Pumps</a>"  # the list's link, not the flash message
    assert client.post(f"/customers/{customer.id}/archive").status_code == 302
    assert row not in client.get("/customers/").get_data(as_text=True)
    assert row in client.get("/customers/?archived=1").get_data(as_text=True)
    resp = client.post(f"/customers/{customer.id}/archive", data={"unarchive": "1"})
    assert resp.status_code == 302
    assert row in client.get("/customers/").get_data(as_text=True)


def test_archive_with_open_job_is_422_and_explains(client, login_as, shop, db):
    rotor = shop.rotor()
    shop.job(rotor)
    db.commit()
    login_as("operator")
    resp = client.post(f"/customers/{rotor.customer_id}/archive")
    assert resp.status_code == 422
    assert "open job" in resp.get_data(as_text=True)


def test_search_and_pagination(client, login_as, shop, db):
    for n in range(30):
        shop.customer(name=f"Paged Customer {n:02d}")
    shop.customer(name="Zinnia", contact="Paged Contact")
    db.commit()
    login_as("operator")
    first = client.get("/customers/?q=paged").get_data(as_text=True)
    assert "page 1 of 2" in first and "Paged Customer 00" in first
    assert "Paged Customer 29" not in first
    second = client.get("/customers/?q=paged&page=2").get_data(as_text=True)
    assert "Paged Customer 29" in second and "Zinnia" in second  # contact matches too
    junk = client.get("/customers/?q=paged&page=abc")
    assert junk.status_code == 200 and "page 1 of 2" in junk.get_data(as_text=True)


def test_unknown_customer_is_404(client, login_as):
    login_as("operator")
    assert client.get("/customers/999999").status_code == 404


def test_detail_query_count_does_not_grow_with_jobs(client, login_as, shop, db, count_queries):
    few = shop.customer()
    many = shop.customer()
    for customer, n in ((few, 3), (many, 30)):
        rt = shop.rotor_type(customer)
        for _ in range(n):
            shop.job(shop.rotor(rt))
    db.commit()
    login_as("owner")
    counts = []
    for customer in (few, many):
        with count_queries() as q:
            assert client.get(f"/customers/{customer.id}").status_code == 200
        counts.append(q.count)
    assert counts[0] == counts[1]


def test_list_query_count_does_not_grow_with_customers(client, login_as, shop, db, count_queries):
    login_as("operator")
    with count_queries() as q_few:
        client.get("/customers/")
    for _ in range(40):
        shop.customer()
    db.commit()
    with count_queries() as q_many:
        client.get("/customers/")
    assert q_few.count == q_many.count
