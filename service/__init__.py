"""heartsway REST service: the only package that knows HTTP.

``create_app(config=None)`` builds the Flask application; gunicorn runs it as
``service:create_app()``.
"""

from service.app import create_app

__all__ = ["create_app"]
