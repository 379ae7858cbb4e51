import pytest

from calcservice import create_app


@pytest.fixture(scope="session")
def app():
    return create_app({"TESTING": True})


@pytest.fixture()
def client(app):
    return app.test_client()


def post(client, path, body, **kw):
    """POST JSON and return (status, parsed body)."""
    r = client.post(path, json=body, **kw)
    return r.status_code, r.get_json(silent=True)
