"""Helpers shared by the tests: simulated captures, results and boards, the reference data
location, the PostgreSQL test server. Nothing here is collected as a test."""
