"""Browser tests: Debian's chromium driven through Playwright against a live uvicorn server."""
