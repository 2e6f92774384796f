"""Shared fixtures. Backend fixtures live in tests/fixtures_db.py, the sample plant in
tests/fixtures_plant.py; both are registered here."""

pytest_plugins = ["tests.fixtures_db", "tests.fixtures_plant"]
