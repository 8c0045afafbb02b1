"""The Redis check and access stores' Lua scripts: each status change is one atomic script.

Every script compares the ``status`` field before it moves a check (compare-and-set) and keeps the
check's indexes in step. The scripts touch keys derived from the record, so this targets a single
Redis server, not Redis Cluster.
"""

# Shared Lua helper: move a check from its current status to ``to`` and keep every index in step.
LUA_MOVE = """
local function move(P, id, ck, from, to, now, ttl)
  local batch = redis.call('HGET', ck, 'batch_id')
  local tenant = redis.call('HGET', ck, 'tenant')
  redis.call('HSET', ck, 'status', to, 'updated_at', now)
  if batch and batch ~= '' then
    local counts = P .. 'batch:' .. batch .. ':counts'
    redis.call('HINCRBY', counts, 's:' .. from, -1)
    redis.call('HINCRBY', counts, 's:' .. to, 1)
    redis.call('EXPIRE', counts, ttl)
  end
  if to == 'done' or to == 'failed' or to == 'cancelled' then
    redis.call('HSET', ck, 'finished_at', now)
    redis.call('HDEL', ck, 'lease_expires_at')
    redis.call('SREM', P .. 't:' .. tenant .. ':open', id)
    redis.call('SREM', P .. 't:' .. tenant .. ':urgent', id)
    redis.call('ZREM', P .. 'queued', id)
    redis.call('ZREM', P .. 'leases', id)
  end
  redis.call('EXPIRE', ck, ttl)
  redis.call('EXPIRE', P .. 'req:' .. id, ttl)
  local shared = redis.call('HGET', ck, 'shared')
  if shared then
    for digest in string.gmatch(shared, '%S+') do
      redis.call('EXPIRE', P .. 'blob:' .. digest, ttl)
    end
  end
end
"""

# ARGV: prefix, id, now, lease_until, max_attempts, ttl, reason, worker
# -> 1 claimed, 2 failed (attempts used up), 0 not claimable
LUA_CLAIM = LUA_MOVE + """
local P, id = ARGV[1], ARGV[2]
local ck = P .. 'check:' .. id
local now = tonumber(ARGV[3])
local st = redis.call('HGET', ck, 'status')
if not st then return 0 end
if st == 'running' then
  local lease = tonumber(redis.call('HGET', ck, 'lease_expires_at') or '0')
  if lease >= now then return 0 end
elseif st ~= 'queued' then
  return 0
end
local attempts = tonumber(redis.call('HGET', ck, 'attempts') or '0')
if attempts >= tonumber(ARGV[5]) then
  move(P, id, ck, st, 'failed', ARGV[3], ARGV[6])
  redis.call('HSET', ck, 'error', string.format(ARGV[7], attempts))
  return 2
end
move(P, id, ck, st, 'running', ARGV[3], ARGV[6])
redis.call('HSET', ck, 'attempts', attempts + 1, 'started_at', ARGV[3],
           'lease_expires_at', ARGV[4], 'worker', ARGV[8])
redis.call('ZREM', P .. 'queued', id)
redis.call('ZADD', P .. 'leases', ARGV[4], id)
return 1
"""

# ARGV: prefix, id, now, ttl, verdict json, verdict name, unstable_count, first freq, first node
LUA_COMPLETE = LUA_MOVE + """
local P, id = ARGV[1], ARGV[2]
local ck = P .. 'check:' .. id
if redis.call('HGET', ck, 'status') ~= 'running' then return 0 end
move(P, id, ck, 'running', 'done', ARGV[3], ARGV[4])
redis.call('SET', P .. 'verdict:' .. id, ARGV[5], 'EX', ARGV[4])
redis.call('HSET', ck, 'verdict_name', ARGV[6], 'unstable_count', ARGV[7],
           'first_frequency_hz', ARGV[8], 'first_node', ARGV[9])
local batch = redis.call('HGET', ck, 'batch_id')
if batch and batch ~= '' and ARGV[6] ~= '' then
  redis.call('HINCRBY', P .. 'batch:' .. batch .. ':counts', 'v:' .. ARGV[6], 1)
end
return 1
"""

# ARGV: prefix, id, now, ttl, reason, tenant-or-empty, target status
LUA_FINISH = LUA_MOVE + """
local P, id = ARGV[1], ARGV[2]
local ck = P .. 'check:' .. id
local st = redis.call('HGET', ck, 'status')
if st ~= 'queued' and st ~= 'running' then return 0 end
if ARGV[6] ~= '' and redis.call('HGET', ck, 'tenant') ~= ARGV[6] then return 0 end
move(P, id, ck, st, ARGV[7], ARGV[3], ARGV[4])
if ARGV[5] ~= '' then redis.call('HSET', ck, 'error', ARGV[5]) end
return 1
"""

# ARGV: prefix, id, ended (a time just before now)
LUA_RELEASE = """
local P, id = ARGV[1], ARGV[2]
local ck = P .. 'check:' .. id
if redis.call('HGET', ck, 'status') ~= 'running' then return 0 end
redis.call('HSET', ck, 'lease_expires_at', ARGV[3])
redis.call('ZADD', P .. 'leases', ARGV[3], id)
return 1
"""

# KEYS[1] = batch ids list; ARGV: prefix, now, ttl, tenant
LUA_CANCEL_BATCH = LUA_MOVE + """
local P = ARGV[1]
local n = 0
for _, id in ipairs(redis.call('LRANGE', KEYS[1], 0, -1)) do
  local ck = P .. 'check:' .. id
  local st = redis.call('HGET', ck, 'status')
  if (st == 'queued' or st == 'running') and redis.call('HGET', ck, 'tenant') == ARGV[4] then
    move(P, id, ck, st, 'cancelled', ARGV[2], ARGV[3])
    n = n + 1
  end
end
return n
"""

# KEYS[1] = idempotency key; ARGV: body hash, pending ttl (ms)
LUA_IDEM_BEGIN = """
local h = redis.call('HGET', KEYS[1], 'body_hash')
if not h then
  redis.call('HSET', KEYS[1], 'body_hash', ARGV[1])
  redis.call('PEXPIRE', KEYS[1], ARGV[2])
  return {'new', ''}
end
if h ~= ARGV[1] then return {'mismatch', ''} end
local c = redis.call('HGET', KEYS[1], 'check_id')
if not c then return {'pending', ''} end
return {'done', c}
"""

# KEYS[1] = the tenant's unfinished set, KEYS[2] = its unfinished urgent set; ARGV: limit (-1:
# none), urgent limit (-1: the checks are not urgent; -2: urgent without a limit), ids...
# -> {1 accepted | 0 over the limit | 2 over the urgent limit, unfinished (urgent) count}
LUA_RESERVE = """
local n = redis.call('SCARD', KEYS[1])
local limit = tonumber(ARGV[1])
local count = #ARGV - 2
if limit >= 0 and n + count > limit then return {0, n} end
local ulimit = tonumber(ARGV[2])
if ulimit ~= -1 then
  local u = redis.call('SCARD', KEYS[2])
  if ulimit >= 0 and u + count > ulimit then return {2, u} end
  for i = 3, #ARGV do redis.call('SADD', KEYS[2], ARGV[i]) end
end
for i = 3, #ARGV do redis.call('SADD', KEYS[1], ARGV[i]) end
return {1, n}
"""

# KEYS[1] = a counter of the current window; ARGV: amount, limit, ttl (s) -> 1 counted, 0 not
LUA_COUNT = """
local amount = tonumber(ARGV[1])
local v = tonumber(redis.call('GET', KEYS[1]) or '0')
if amount > 0 and v + amount > tonumber(ARGV[2]) then return 0 end
redis.call('INCRBY', KEYS[1], amount)
redis.call('EXPIRE', KEYS[1], ARGV[3])
return 1
"""

# KEYS[1] = the waiting callbacks zset; ARGV: batch id, now, held until -> 1 taken, 0 not due
LUA_TAKE_CALLBACK = """
local at = redis.call('ZSCORE', KEYS[1], ARGV[1])
if not at or tonumber(at) > tonumber(ARGV[2]) then return 0 end
redis.call('ZADD', KEYS[1], ARGV[3], ARGV[1])
return 1
"""

LUA_IDEM_RELEASE = """
if redis.call('HEXISTS', KEYS[1], 'check_id') == 0 then redis.call('DEL', KEYS[1]) end
return 1
"""
