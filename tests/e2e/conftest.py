"""Fixtures for the end-to-end tests: the browser journeys' live server and Chromium."""

from tests.e2e.browser import browser_type_launch_args, live_server  # noqa: F401
