"""Shared layer: Redis keyspace, job lifecycle and queue settings (no Flask, no worker code)."""
