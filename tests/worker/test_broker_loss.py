"""Redis dies while a task is unacknowledged: closing the broken connection must not kill the worker.

The worker's consumer collects the broken connection and then closes it; Celery tolerates only
connection errors there. kombu used to raise AttributeError ('NoneType' object has no attribute
'hostname') from the channel that holds the unacknowledged message, and the worker exited for
good ("Unrecoverable error"). This replays the consumer's sequence on real kombu and a real
Redis that is killed; the end-to-end check is tests/e2e/test_faults.py.
"""
import pytest
from kombu import Connection, Exchange, Queue

from tests.conftest import RedisServer


@pytest.fixture
def doomed_redis():
    server = RedisServer()
    yield server
    if server.proc.poll() is None:
        server.stop()


def test_closing_a_connection_after_redis_died_with_a_message_unacknowledged(doomed_redis):
    from worker.broker import contain_closed_channel_fault

    assert contain_closed_channel_fault()  # as every worker process does before it connects

    conn = Connection(doomed_redis.url)
    conn.ensure_connection()
    tasks = Queue("broker-loss", Exchange("broker-loss"), "broker-loss")
    with conn.Producer() as producer:
        producer.publish({"x": 1}, exchange=tasks.exchange, routing_key="broker-loss", declare=[tasks],
                         serializer="json")
    channel = conn.default_channel  # the task consumer's channel, as in Celery
    delivered = []
    consumer = conn.Consumer(tasks, callbacks=[lambda body, message: delivered.append(message)], channel=channel)
    consumer.consume()
    conn.drain_events(timeout=5)
    assert len(delivered) == 1 and len(channel.qos._delivered) == 1  # one task in flight
    # a second channel with an auto-delete broadcast queue, like the worker's control channel
    control = conn.channel()
    broadcast = Queue("broker-loss.control", Exchange("broker-loss.control", type="fanout"), auto_delete=True)
    conn.Consumer(broadcast, callbacks=[], channel=control).consume()
    control.client  # noqa: B018 (its Redis client exists, as in a running worker)
    channel._brpop_start()  # the event loop's BRPOP is in flight
    doomed_redis.kill()
    try:  # what celery.worker.consumer.Consumer.on_connection_error_after_connected does
        conn.collect(socket_timeout=1)
    except Exception:
        pass
    try:
        conn.close()
    except conn.connection_errors:
        pass  # ignored by Celery: the consumer reconnects
