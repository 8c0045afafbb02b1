"""The stores on Redis, for several API and worker hosts sharing one Redis server.

Check store keys (all under the prefix): ``check:{id}`` (hash: the record, the request's
``encoding`` and the content hashes of its batch's ``shared`` bytes), ``req:{id}`` (the stored
request's bytes), ``verdict:{id}`` (JSON text), ``blob:{sha256}`` (shared bytes of a batch, stored
once), ``batch:{id}`` (hash), ``batch:{id}:ids`` (list, submission order), ``batch:{id}:counts``
(hash ``s:<status>``/``v:<verdict>``), per tenant ``t:{tenant}:batches`` (zset) and
``t:{tenant}:open`` (unfinished ids); global ``queued`` and ``leases`` (zsets scored by time) for
the reconciler. Everything a check owns carries a TTL equal to the retention, renewed at each state
change. Access store keys: see ``access``.
"""

from workers.store.redis_backend.access import RedisAccessStore
from workers.store.redis_backend.checks import RedisCheckStore
from workers.store.redis_backend.connection import connect, patient_retry

__all__ = ["RedisAccessStore", "RedisCheckStore", "connect", "patient_retry"]
