"""Scenario generators for invented sites, and recorded feeds (recorded/*.jsonl.gz)."""
