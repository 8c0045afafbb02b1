"""workers.redis_transport against a real Redis: messages still go through and are acknowledged,
with one redis-py client per connection pool instead of one per publish and acknowledgement.

Oracle: kombu's documented consumer contract (a message acknowledged with ``message.ack()`` is not
delivered again; an unacknowledged one stays in the transport's ``unacked`` hash until restored)
and redis-py's documented thread safety of a client on a shared ``ConnectionPool``.
"""

from __future__ import annotations

import uuid

import pytest
import redis
from kombu import Connection, Exchange, Queue

from tests.conftest import TEST_REDIS_URL
from workers import redis_transport


@pytest.fixture
def broker() -> Connection:
    prefix = f"ballast-test-kombu:{uuid.uuid4().hex}:"
    connection = Connection(TEST_REDIS_URL, transport=redis_transport.Transport,
                            transport_options={"global_keyprefix": prefix})
    try:
        yield connection
    finally:
        connection.release()
        plain = redis.Redis.from_url(TEST_REDIS_URL)
        keys = list(plain.scan_iter(match=prefix + "*", count=1000))
        if keys:
            plain.delete(*keys)
        plain.close()


def test_publish_consume_and_ack_reuse_one_client(broker, monkeypatch):
    made: list[object] = []
    create = redis_transport.Channel._create_client

    def counting_create(self, asynchronous=False):
        client = create(self, asynchronous=asynchronous)
        if not asynchronous:
            made.append(client)
        return client

    monkeypatch.setattr(redis_transport.Channel, "_create_client", counting_create)
    queue = Queue("q", Exchange("q", type="direct"), routing_key="q")
    with broker.Producer() as producer:
        for i in range(5):
            producer.publish({"i": i}, exchange=queue.exchange, routing_key="q",
                             declare=[queue], serializer="json")
    got: list[int] = []
    with broker.Consumer(queue, accept=["json"]) as consumer:
        consumer.qos(prefetch_count=1)

        def on_message(body, message):
            got.append(body["i"])
            message.ack()

        consumer.register_callback(on_message)
        while len(got) < 5:
            broker.drain_events(timeout=5)
    assert got == [0, 1, 2, 3, 4]
    channel = consumer.channel
    # every acknowledgement removed its message from the unacknowledged index
    with channel.conn_or_acquire() as client:
        assert client.hlen(channel.unacked_key) == 0
    # five publishes and five acknowledgements went through a single shared client
    assert len(made) == 1


def test_a_new_pool_gets_a_new_client(broker):
    channel = broker.channel()
    try:
        with channel.conn_or_acquire() as first, channel.conn_or_acquire() as again:
            assert first is again and first.connection_pool is channel.pool
        channel._disconnect_pools()  # what kombu does when the connection is lost
        with channel.conn_or_acquire() as after:
            assert after is not first and after.connection_pool is channel.pool
            assert after.ping()
    finally:
        channel.close()


def test_collected_puts_push_in_order_when_the_block_ends(broker):
    queue = Queue("bulk", Exchange("bulk", type="direct"), routing_key="bulk")
    with broker.Producer() as producer:
        channel = producer.channel
        plain = redis.Redis.from_url(TEST_REDIS_URL)
        key = channel.global_keyprefix + "bulk"
        with channel.collected_puts():
            for i in range(6):
                producer.publish({"i": i}, exchange=queue.exchange, routing_key="bulk",
                                 declare=[queue], serializer="json")
            assert plain.llen(key) == 0  # nothing is pushed before the block ends
        assert plain.llen(key) == 6
        with pytest.raises(RuntimeError), channel.collected_puts():
            producer.publish({"i": 99}, exchange=queue.exchange, routing_key="bulk",
                             serializer="json")
            raise RuntimeError("the caller failed part-way")
        assert plain.llen(key) == 6  # a failed block pushes nothing
        plain.close()
    got: list[int] = []
    with broker.Consumer(queue, accept=["json"]) as consumer:
        consumer.register_callback(lambda body, message: (got.append(body["i"]), message.ack()))
        while len(got) < 6:
            broker.drain_events(timeout=5)
    assert got == [0, 1, 2, 3, 4, 5]  # first published, first delivered (kombu's FIFO queues)
