"""Celery adapter: receives job ids, runs them through the engine, writes results."""
