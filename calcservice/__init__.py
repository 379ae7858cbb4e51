"""calcservice: binary-star orbital elements to physical numbers, with honest uncertainties."""

__version__ = "0.1.0"


def create_app(config=None):
    """Build the Flask application (see :mod:`calcservice.api`)."""
    from .api import create_app as _create_app
    return _create_app(config)
