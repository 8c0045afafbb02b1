"""kombu's Redis transport with a configurable restore interval for unacknowledged messages.

With late acknowledgement a message stays in Redis's ``unacked`` hash while its task runs; if the
worker dies, kombu puts it back on the queue once it is older than ``visibility_timeout``. Stock
kombu (5.6) only looks every 10 s × a throttle of 10 calls, i.e. about every 100 s
(``QoS.restore_visible(interval=10)`` called by ``loop.call_repeatedly(10, ...)`` in
``Transport.register_with_event_loop``), and exposes no option for it. This subclass drops the
throttle and adds a timer of ``restore_interval_s`` seconds (a transport option), so a dead
worker's message comes back ``visibility_timeout + restore_interval_s`` after its delivery.

Stock kombu also builds a new ``redis.Redis`` client (whose constructor copies every response
callback) for each publish and each acknowledgement (``Channel.conn_or_acquire``); measured with a
sampling profiler, that was three quarters of the worker's time spent acknowledging. The channel
here keeps one client per connection pool: redis-py clients are safe to share, each command
borrowing a connection from the pool.

``Channel.collected_puts()`` lets a publisher of many messages (the API queueing a batch) push
them in one pipelined round trip instead of one LPUSH round trip each.

``Channel.withdraw(queue, check_ids)`` takes the messages of cancelled checks out of a queue in
one Lua script per priority list (atomic with the workers' BRPOP and the API's LPUSH), so that a
cancelled batch of thousands of checks leaves nothing behind for workers to skip.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from kombu.transport import redis as kombu_redis
from kombu.utils.json import dumps

from workers.runtime_config import CHECK_HEADER

DEFAULT_RESTORE_INTERVAL_S = 10.0

# KEYS[1] = one priority list of a queue; ARGV = check ids -> how many messages were removed.
# The survivors are pushed back in their order (LRANGE reads head to tail; RPUSH appends).
LUA_WITHDRAW = """
local wanted = {}
for i = 1, #ARGV do wanted[ARGV[i]] = true end
local items = redis.call('LRANGE', KEYS[1], 0, -1)
local keep = {}
local removed = 0
for _, item in ipairs(items) do
  local ok, message = pcall(cjson.decode, item)
  local ref = ok and type(message) == 'table' and type(message.headers) == 'table'
    and message.headers['""" + CHECK_HEADER + """']
  if ref and wanted[ref] then removed = removed + 1 else keep[#keep + 1] = item end
end
if removed > 0 then
  redis.call('DEL', KEYS[1])
  for i = 1, #keep, 1000 do
    redis.call('RPUSH', KEYS[1], unpack(keep, i, math.min(i + 999, #keep)))
  end
end
return removed
"""


class QoS(kombu_redis.QoS):
    """Restores visible-again messages on every call instead of every tenth."""

    def restore_visible(self, start: int = 0, num: int = 10, interval: int = 1) -> None:
        super().restore_visible(start=start, num=num, interval=1)


class Channel(kombu_redis.Channel):
    QoS = QoS
    restore_interval_s = DEFAULT_RESTORE_INTERVAL_S
    from_transport_options = (*kombu_redis.Channel.from_transport_options, "restore_interval_s")
    _shared_client: tuple[Any, Any] | None = None  # (pool, client on that pool)
    _collected: list[tuple[str, str]] | None = None  # (queue key, message) inside collected_puts

    @contextmanager
    def collected_puts(self) -> Iterator[None]:
        """Messages put on queues inside the block are pushed, in order, in one pipeline when it
        ends (none if it raises: the caller's store keeps them ``queued`` for the reconciler)."""
        if self._collected is not None:  # nested: the outer block pushes
            yield
            return
        self._collected = []
        try:
            yield
            pending = self._collected
        finally:
            self._collected = None
        if pending:
            with self.conn_or_acquire() as client:
                pipe = client.pipeline(transaction=False)
                for key, payload in pending:
                    pipe.lpush(key, payload)
                pipe.execute()

    def _put(self, queue: str, message: dict[str, Any], **kwargs: Any) -> None:
        if self._collected is None:
            super()._put(queue, message, **kwargs)
            return
        priority = self._get_message_priority(message, reverse=False)
        self._collected.append((self._q_for_pri(queue, priority), dumps(message)))

    def withdraw(self, queue: str, check_ids: list[str]) -> int:
        """Remove the messages naming ``check_ids`` (header ``ballast_check``) from ``queue``'s
        lists; returns how many were removed."""
        removed = 0
        with self.conn_or_acquire() as client:
            script = client.register_script(LUA_WITHDRAW)
            for pri in self.priority_steps:
                for start in range(0, len(check_ids), 5000):
                    removed += int(script(keys=[self._q_for_pri(queue, pri)],
                                          args=check_ids[start:start + 5000]))
        return removed

    @contextmanager
    def conn_or_acquire(self, client: Any = None) -> Iterator[Any]:
        """``client`` if given, else this channel's client on its current pool (made once per
        pool: kombu drops the pool when it disconnects, and a new pool gets a new client)."""
        if client:
            yield client
            return
        pool = self.pool
        shared = self._shared_client
        if shared is None or shared[0] is not pool:
            shared = self._shared_client = (pool, self._create_client())
        yield shared[1]


class Transport(kombu_redis.Transport):
    """Replaces ``kombu.transport.redis:Transport`` through the ``broker_transport`` setting."""

    Channel = Channel

    def register_with_event_loop(self, connection: Any, loop: Any) -> None:
        super().register_with_event_loop(connection, loop)
        interval = float(
            connection.client.transport_options.get(
                "restore_interval_s", DEFAULT_RESTORE_INTERVAL_S
            )
        )
        loop.call_repeatedly(interval, self.cycle.maybe_restore_messages)
