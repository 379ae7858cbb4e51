import pytest

from calcservice import create_app


@pytest.fixture(scope="session")
def app():
    return create_app({"TESTING": True})


@pytest.fixture()
def client(app):
    return app.test_client()


@pytest.fixture(scope="module")
def local():
    """The Python client on the service in this process (Client("local"))."""
    from calcservice.client import Client
    return Client("local")


def post(client, path, body, **kw):
    """POST JSON and return (status, parsed body)."""
    r = client.post(path, json=body, **kw)
    return r.status_code, r.get_json(silent=True)


def answered(client, path, body):
    """POST JSON that must be answered (200) and return the answer."""
    r = client.post(path, json=body)
    assert r.status_code == 200, r.get_json()
    return r.get_json()
