"""Containment of a fault in the messaging library (kombu's Redis transport) on broker loss.

Installed by worker/celery_app.py in every worker process before it connects.
"""
from __future__ import annotations


def contain_closed_channel_fault() -> bool:
    """Turn kombu's crash on a channel closed after its connection into a connection error.

    When Redis dies while a task is unacknowledged, Celery's consumer collects the broken
    connection: closing one channel fails (Redis is gone), so the channel holding the
    unacknowledged message stays open while the transport drops its ``client``. The
    consumer's second close then tries to restore the message ("Restoring 1
    unacknowledged message(s)"), builds a new Redis pool from ``transport.client``, which
    is None, and raises ``AttributeError: 'NoneType' object has no attribute 'hostname'``
    (kombu.transport.redis.Channel._connparams). Celery ignores only connection errors
    there, so the worker stopped for good ("Unrecoverable error"). A restore cannot reach
    a dead broker anyway: we raise the connection error kombu expects, the consumer
    reconnects, and the message stays in the broker's unacknowledged set, which the
    reconciler clears (worker/reconciler.py), while the job record, the truth, is
    requeued by its lease. Returns True when the guard is in place.
    """
    import redis as redis_lib
    from kombu.transport import redis as kombu_redis

    original = getattr(kombu_redis.Channel, "_connparams", None)
    if original is None:  # a kombu without this path: nothing to contain
        return False
    if getattr(original, "_stifflane_guard", False):
        return True

    def _connparams(self, *args, **kwargs):
        transport = self.connection
        if transport is None or getattr(transport, "client", None) is None:
            raise redis_lib.ConnectionError("the broker connection of this channel is already closed")
        return original(self, *args, **kwargs)

    _connparams._stifflane_guard = True
    kombu_redis.Channel._connparams = _connparams
    return True
