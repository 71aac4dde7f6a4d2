"""On-demand load and durability tests against a real server (python3 -m pytest tests/load -s)."""
