"""Batch and chunk state transitions as Redis Lua scripts: each change is one atomic step.

A batch of ``total`` members is cut into ``n_chunks`` chunks of ``chunk_size``
consecutive member indexes. Chunks are published in index order, at most a
window of them in flight at a time (``published`` and ``inflight`` fields), so
nothing per member or per chunk is written at submit. Chunk states live in the
chunk hash: field ``s<i>`` absent = waiting, ``r`` running, ``d`` done (its
result blob is written), ``c`` cancelled, ``x`` exhausted (its worker died too
often; its members are reported as lost). ``a<i>`` counts attempts; the lease of
a running chunk ``<i>`` is its score in the lease zset, where a published chunk not
yet claimed waits as ``w<i>`` scored by the time it is due for republication. A running attempt is fenced by
its attempt number, like jobs (jobs/lifecycle.py): a chunk result is written
once, and its members are counted once.

The batch is settled (``succeeded``, or ``cancelled`` when a cancel was asked
for) when every chunk is done, cancelled or exhausted.

Fair sharing: each owner's window of chunks in flight is ``max_inflight`` divided
by the owner's number of unsettled batches (the active-owners hash), so API keys,
not batches, share the queue in turns.

KEYS for every script: batch hash, chunk hash, lease zset, active-batches zset,
active-owners hash, then extras.

Time comes from Redis (``TIME``) inside every script, as for jobs: chunk leases and
republication times are on one clock, whatever the clocks of the workers' hosts.
"""

# Shared Lua helpers.
_COMMON = """
local function redis_now()
  local t = redis.call('TIME')
  return tonumber(t[1]) + tonumber(t[2]) / 1000000
end
local function size(i)
  local cs = tonumber(redis.call('HGET', KEYS[1], 'chunk_size'))
  local total = tonumber(redis.call('HGET', KEYS[1], 'total'))
  return math.min(cs, total - i * cs)
end
local function close_chunk(i, state, counter, count, was_published)
  redis.call('HSET', KEYS[2], 's' .. i, state)
  redis.call('ZREM', KEYS[3], tostring(i), 'w' .. i)
  redis.call('HINCRBY', KEYS[1], 'finished_chunks', 1)
  if was_published then redis.call('HINCRBY', KEYS[1], 'inflight', -1) end
  if count > 0 then redis.call('HINCRBY', KEYS[1], counter, count) end
end
local function settle(id, now, ttl)
  local current = redis.call('HGET', KEYS[1], 'state')
  if current ~= 'queued' and current ~= 'running' then return 0 end
  local fin = tonumber(redis.call('HGET', KEYS[1], 'finished_chunks'))
  if fin < tonumber(redis.call('HGET', KEYS[1], 'n_chunks')) then return 0 end
  local state = 'succeeded'
  if redis.call('HGET', KEYS[1], 'cancel') == '1' then state = 'cancelled' end
  redis.call('HSET', KEYS[1], 'state', state, 'finished', now)
  if not redis.call('HGET', KEYS[1], 'started') then redis.call('HSET', KEYS[1], 'started', now) end
  redis.call('ZREM', KEYS[4], id)
  local owner = redis.call('HGET', KEYS[1], 'owner')
  if redis.call('HINCRBY', KEYS[5], owner, -1) <= 0 then redis.call('HDEL', KEYS[5], owner) end
  redis.call('EXPIRE', KEYS[1], ttl)
  redis.call('EXPIRE', KEYS[2], ttl)
  redis.call('DEL', KEYS[3])
  return 1
end
"""

# ARGV: id, chunk, lease_seconds, max_attempts, ttl
# Returns {status, attempt}: claimed | running | done | cancelled | exhausted | missing.
CLAIM = _COMMON + """
local id, i, now = ARGV[1], tonumber(ARGV[2]), redis_now()
local state = redis.call('HGET', KEYS[1], 'state')
if not state then return {'missing', 0} end
local cs = redis.call('HGET', KEYS[2], 's' .. i)
local names = {d='done', c='cancelled', x='exhausted'}
if names[cs or ''] then return {names[cs], 0} end
if cs == 'r' and tonumber(redis.call('ZSCORE', KEYS[3], tostring(i)) or '0') >= now then
  return {'running', 0}
end
redis.call('HINCRBY', KEYS[1], 'rev', 1)
if redis.call('HGET', KEYS[1], 'cancel') == '1' then
  close_chunk(i, 'c', 'cancelled', size(i), true)
  settle(id, now, tonumber(ARGV[5]))
  return {'cancelled', 0}
end
local attempt = redis.call('HINCRBY', KEYS[2], 'a' .. i, 1)
if attempt > tonumber(ARGV[4]) then
  close_chunk(i, 'x', 'lost', size(i), true)
  settle(id, now, tonumber(ARGV[5]))
  return {'exhausted', attempt}
end
redis.call('HSET', KEYS[2], 's' .. i, 'r')
redis.call('ZREM', KEYS[3], 'w' .. i)
redis.call('ZADD', KEYS[3], now + tonumber(ARGV[3]), tostring(i))
if state == 'queued' then redis.call('HSET', KEYS[1], 'state', 'running', 'started', now) end
return {'claimed', attempt}
"""

# ARGV: chunk, attempt, lease_seconds. Returns -1 when fenced out, else the cancel flag.
HEARTBEAT = _COMMON + """
local i = ARGV[1]
if redis.call('HGET', KEYS[2], 's' .. i) ~= 'r' then return -1 end
if redis.call('HGET', KEYS[2], 'a' .. i) ~= ARGV[2] then return -1 end
redis.call('ZADD', KEYS[3], redis_now() + tonumber(ARGV[3]), i)
return tonumber(redis.call('HGET', KEYS[1], 'cancel') or '0')
"""

# KEYS[6]: the chunk's result key.
# ARGV: id, chunk, attempt, n_ok, n_failed, n_cancelled, ttl, blob
# Returns 0 when fenced out, 1 when written, 2 when written and the batch is now settled.
FINISH = _COMMON + """
local id, i, now, ttl = ARGV[1], tonumber(ARGV[2]), redis_now(), tonumber(ARGV[7])
if redis.call('HGET', KEYS[2], 's' .. i) ~= 'r' then return 0 end
if redis.call('HGET', KEYS[2], 'a' .. i) ~= ARGV[3] then return 0 end
redis.call('SET', KEYS[6], ARGV[8], 'EX', ttl)
close_chunk(i, 'd', 'done', tonumber(ARGV[4]), true)
redis.call('HINCRBY', KEYS[1], 'failed', tonumber(ARGV[5]))
redis.call('HINCRBY', KEYS[1], 'cancelled', tonumber(ARGV[6]))
redis.call('HINCRBY', KEYS[1], 'writes', 1)  -- evidence for tests: one write per chunk
redis.call('HINCRBY', KEYS[1], 'rev', 1)
return 1 + settle(id, now, ttl)
"""

# ARGV: max_inflight, stale_seconds. Returns the chunk indexes to publish now (the
# caller publishes them), keeping the owner's share of max_inflight; each gets a waiting entry 'w<i>' in the lease zset, due at now + stale.
NEXT = _COMMON + """
local now = redis_now()
local state = redis.call('HGET', KEYS[1], 'state')
if state ~= 'queued' and state ~= 'running' then return {} end
if redis.call('HGET', KEYS[1], 'cancel') == '1' then return {} end
local n = tonumber(redis.call('HGET', KEYS[1], 'n_chunks'))
local published = tonumber(redis.call('HGET', KEYS[1], 'published'))
local inflight = tonumber(redis.call('HGET', KEYS[1], 'inflight'))
local owner = redis.call('HGET', KEYS[1], 'owner')
local batches = math.max(1, tonumber(redis.call('HGET', KEYS[5], owner) or '1'))
local window = math.max(1, math.floor(tonumber(ARGV[1]) / batches))
local out = {}
while inflight < window and published < n do
  table.insert(out, published)
  redis.call('ZADD', KEYS[3], now + tonumber(ARGV[2]), 'w' .. published)
  published = published + 1
  inflight = inflight + 1
end
redis.call('HSET', KEYS[1], 'published', published, 'inflight', inflight)
return out
"""

# ARGV: id, ttl. Cancels every chunk that has not started; running ones stop at
# their next member. Returns the batch state after the call.
CANCEL = _COMMON + """
local id, now, ttl = ARGV[1], redis_now(), tonumber(ARGV[2])
local state = redis.call('HGET', KEYS[1], 'state')
if not state then return 'missing' end
if state ~= 'queued' and state ~= 'running' then return state end
if redis.call('HGET', KEYS[1], 'cancel') == '1' then return 'cancelling' end
redis.call('HSET', KEYS[1], 'cancel', '1')
redis.call('HINCRBY', KEYS[1], 'rev', 1)
local n = tonumber(redis.call('HGET', KEYS[1], 'n_chunks'))
local published = tonumber(redis.call('HGET', KEYS[1], 'published'))
for i = 0, published - 1 do
  if not redis.call('HGET', KEYS[2], 's' .. i) then close_chunk(i, 'c', 'cancelled', size(i), true) end
end
if published < n then  -- never published: settle them in bulk
  local cs = tonumber(redis.call('HGET', KEYS[1], 'chunk_size'))
  local total = tonumber(redis.call('HGET', KEYS[1], 'total'))
  redis.call('HINCRBY', KEYS[1], 'cancelled', total - published * cs)
  redis.call('HINCRBY', KEYS[1], 'finished_chunks', n - published)
  redis.call('HSET', KEYS[1], 'published', n, 'unpublished_from', published)
end
if settle(id, now, ttl) == 1 then return 'cancelled' end
return 'cancelling'
"""

# ARGV: id, ttl, stale_seconds. Running chunks whose lease expired go back to waiting,
# or to cancelled when a cancel was asked for. Waiting chunks not claimed within stale_seconds
# of publication are published again: their message may sit unacknowledged in a dead
# worker's prefetch until the broker's visibility timeout (a duplicate is harmless: claims
# are fenced). Returns the chunk indexes to (re)publish.
REQUEUE = _COMMON + """
local id, now, ttl, stale = ARGV[1], redis_now(), tonumber(ARGV[2]), tonumber(ARGV[3])
local due = redis.call('ZRANGEBYSCORE', KEYS[3], '-inf', '(' .. now)
local out = {}
for _, member in ipairs(due) do
  if string.sub(member, 1, 1) == 'w' then
    local i = tonumber(string.sub(member, 2))
    if redis.call('HGET', KEYS[2], 's' .. i) then
      redis.call('ZREM', KEYS[3], member)
    else
      redis.call('ZADD', KEYS[3], now + stale, member)
      table.insert(out, i)
    end
  else
    local i = tonumber(member)
    redis.call('HINCRBY', KEYS[1], 'rev', 1)
    if redis.call('HGET', KEYS[1], 'cancel') == '1' then
      close_chunk(i, 'c', 'cancelled', size(i), true)
    else
      redis.call('HDEL', KEYS[2], 's' .. i)
      redis.call('ZREM', KEYS[3], member)
      redis.call('ZADD', KEYS[3], now + stale, 'w' .. i)
      table.insert(out, i)
    end
  end
end
settle(id, now, ttl)
return out
"""
