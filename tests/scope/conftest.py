"""Fixtures of the scope tests: the manager pages' lab and the page client."""

from tests.web.conftest import web_client
from tests.web.manager.conftest import lab

__all__ = ["lab", "web_client"]
