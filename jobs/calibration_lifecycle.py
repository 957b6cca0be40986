"""Calibration and chunk state transitions as Redis Lua scripts: each change is one atomic step.

A calibration of ``total`` starts is cut into ``n_chunks`` chunks of ``chunk_size``
consecutive start indexes, run like batch chunks (jobs/batch_lifecycle.py): published in
index order, at most a window in flight per owner, claimed and finished fenced by attempt,
their lease in a zset, republished when their worker or their message is lost. Chunk
states live in the chunk hash: ``s<i>`` absent = waiting, ``r`` running, ``d`` done (its
outcomes are written), ``c`` cancelled, ``x`` exhausted (its worker died too often: its
starts are counted lost). ``a<i>`` counts attempts.

One more unit follows the starts: the summary, chunk index ``n_chunks``. Once every start
chunk is settled (and no cancel was asked for), NEXT hands it out; it is claimed, leased,
requeued and fenced like a chunk, and its finish settles the calibration (``succeeded``
with the estimate, or ``failed`` with a message). A cancel settles the calibration as
``cancelled`` once no start chunk is running; it is refused (``summarising``) once every
start is in, since the estimate is then seconds away.

The record keeps the best sum of squares reached so far (``best``, ``best_start``), raised
only by a fenced finish, so progress shows it while the starts run.

KEYS for every script: calibration hash, chunk hash, lease zset, active zset, active-owners
hash, then extras. Time comes from Redis (``TIME``) inside every script.
"""

from jobs import batch_lifecycle

_COMMON = """
local function redis_now()
  local t = redis.call('TIME')
  return tonumber(t[1]) + tonumber(t[2]) / 1000000
end
local function n_chunks() return tonumber(redis.call('HGET', KEYS[1], 'n_chunks')) end
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
local function finalize(id, state, now, ttl, message)
  redis.call('HSET', KEYS[1], 'state', state, 'finished', now, 'stage', 'done')
  if message and message ~= '' then redis.call('HSET', KEYS[1], 'message', message) end
  if not redis.call('HGET', KEYS[1], 'started') then redis.call('HSET', KEYS[1], 'started', now) end
  redis.call('HINCRBY', KEYS[1], 'rev', 1)
  redis.call('ZREM', KEYS[4], id)
  local owner = redis.call('HGET', KEYS[1], 'owner')
  if redis.call('HINCRBY', KEYS[5], owner, -1) <= 0 then redis.call('HDEL', KEYS[5], owner) end
  redis.call('EXPIRE', KEYS[1], ttl)
  redis.call('EXPIRE', KEYS[2], ttl)
  redis.call('DEL', KEYS[3])
end
-- Every start chunk settled: a cancelled calibration ends here; otherwise the summary is due.
local function starts_settled(id, now, ttl)
  local current = redis.call('HGET', KEYS[1], 'state')
  if current ~= 'queued' and current ~= 'running' then return 0 end
  if tonumber(redis.call('HGET', KEYS[1], 'finished_chunks')) < n_chunks() then return 0 end
  if redis.call('HGET', KEYS[1], 'cancel') == '1' then
    finalize(id, 'cancelled', now, ttl, 'cancelled')
    return 1
  end
  redis.call('HSET', KEYS[1], 'stage', 'summary')
  return 0
end
"""

# ARGV: id, chunk, lease_seconds, max_attempts, ttl
# Returns {status, attempt}: claimed | running | done | cancelled | exhausted | missing.
CLAIM = _COMMON + """
local id, i, now, ttl = ARGV[1], tonumber(ARGV[2]), redis_now(), tonumber(ARGV[5])
local state = redis.call('HGET', KEYS[1], 'state')
if not state then return {'missing', 0} end
if i > n_chunks() then return {'missing', 0} end
local cs = redis.call('HGET', KEYS[2], 's' .. i)
local names = {d='done', c='cancelled', x='exhausted'}
if names[cs or ''] then return {names[cs], 0} end
if state ~= 'queued' and state ~= 'running' then return {'done', 0} end
if cs == 'r' and tonumber(redis.call('ZSCORE', KEYS[3], tostring(i)) or '0') >= now then
  return {'running', 0}
end
local summary = (i == n_chunks())
if summary and tonumber(redis.call('HGET', KEYS[1], 'finished_chunks')) < n_chunks() then
  return {'running', 0}  -- not due yet (a stray message): the starts are not all in
end
redis.call('HINCRBY', KEYS[1], 'rev', 1)
if redis.call('HGET', KEYS[1], 'cancel') == '1' then
  if summary then
    finalize(id, 'cancelled', now, ttl, 'cancelled')
  else
    close_chunk(i, 'c', 'cancelled', size(i), true)
    starts_settled(id, now, ttl)
  end
  return {'cancelled', 0}
end
local attempt = redis.call('HINCRBY', KEYS[2], 'a' .. i, 1)
if attempt > tonumber(ARGV[4]) then
  if summary then
    redis.call('HSET', KEYS[2], 's' .. i, 'x')
    finalize(id, 'failed', now, ttl, 'the summary of the starts stopped its worker ' .. (attempt - 1) ..
             ' times; the start outcomes are kept')
  else
    close_chunk(i, 'x', 'lost', size(i), true)
    starts_settled(id, now, ttl)
  end
  return {'exhausted', attempt}
end
redis.call('HSET', KEYS[2], 's' .. i, 'r')
redis.call('ZREM', KEYS[3], 'w' .. i)
redis.call('ZADD', KEYS[3], now + tonumber(ARGV[3]), tostring(i))
if state == 'queued' then redis.call('HSET', KEYS[1], 'state', 'running', 'started', now) end
return {'claimed', attempt}
"""

# the chunk lease: the batches' own script (same keys: record, chunk states, leases)
HEARTBEAT = batch_lifecycle.HEARTBEAT

# KEYS[6]: the chunk's outcomes key.
# ARGV: id, chunk, attempt, n_done, n_failed, n_cancelled, failed_solves, best ('' = none),
#       best_start, ttl, blob
# Returns 0 when fenced out, 1 when written, 2 when written and every start is in.
FINISH = _COMMON + """
local id, i, now, ttl = ARGV[1], tonumber(ARGV[2]), redis_now(), tonumber(ARGV[10])
if i >= n_chunks() then return 0 end
if redis.call('HGET', KEYS[2], 's' .. i) ~= 'r' then return 0 end
if redis.call('HGET', KEYS[2], 'a' .. i) ~= ARGV[3] then return 0 end
redis.call('SET', KEYS[6], ARGV[11], 'EX', ttl)
close_chunk(i, 'd', 'done', tonumber(ARGV[4]), true)
redis.call('HINCRBY', KEYS[1], 'failed', tonumber(ARGV[5]))
redis.call('HINCRBY', KEYS[1], 'cancelled', tonumber(ARGV[6]))
redis.call('HINCRBY', KEYS[1], 'failed_solves', tonumber(ARGV[7]))
if ARGV[8] ~= '' then
  local best = redis.call('HGET', KEYS[1], 'best')
  if not best or tonumber(ARGV[8]) < tonumber(best) then
    redis.call('HSET', KEYS[1], 'best', ARGV[8], 'best_start', ARGV[9])
  end
end
redis.call('HINCRBY', KEYS[1], 'writes', 1)  -- evidence for tests: one write per chunk
redis.call('HINCRBY', KEYS[1], 'rev', 1)
starts_settled(id, now, ttl)
if tonumber(redis.call('HGET', KEYS[1], 'finished_chunks')) >= n_chunks() then return 2 end
return 1
"""

# KEYS[6]: the estimate key. ARGV: id, attempt, state ('succeeded' | 'failed'), message, ttl, blob ('' = none)
# Returns 0 when fenced out, 1 when written (the calibration is settled).
FINISH_SUMMARY = _COMMON + """
local id, now, ttl = ARGV[1], redis_now(), tonumber(ARGV[5])
local i = n_chunks()
if redis.call('HGET', KEYS[2], 's' .. i) ~= 'r' then return 0 end
if redis.call('HGET', KEYS[2], 'a' .. i) ~= ARGV[2] then return 0 end
if ARGV[6] ~= '' then redis.call('SET', KEYS[6], ARGV[6], 'EX', ttl) end
redis.call('HSET', KEYS[2], 's' .. i, 'd')
redis.call('HINCRBY', KEYS[1], 'writes', 1)
finalize(id, ARGV[3], now, ttl, ARGV[4])
return 1
"""

# ARGV: max_inflight, stale_seconds. Returns the chunk indexes to publish now (the caller
# publishes them): start chunks within the owner's share of max_inflight, then the summary.
NEXT = _COMMON + """
local now = redis_now()
local state = redis.call('HGET', KEYS[1], 'state')
if state ~= 'queued' and state ~= 'running' then return {} end
if redis.call('HGET', KEYS[1], 'cancel') == '1' then return {} end
local n = n_chunks()
local out = {}
if tonumber(redis.call('HGET', KEYS[1], 'finished_chunks')) >= n then
  if redis.call('HGET', KEYS[1], 'summary_published') ~= '1' then
    redis.call('HSET', KEYS[1], 'summary_published', '1', 'stage', 'summary')
    redis.call('ZADD', KEYS[3], now + tonumber(ARGV[2]), 'w' .. n)
    table.insert(out, n)
  end
  return out
end
local published = tonumber(redis.call('HGET', KEYS[1], 'published'))
local inflight = tonumber(redis.call('HGET', KEYS[1], 'inflight'))
local owner = redis.call('HGET', KEYS[1], 'owner')
local active = math.max(1, tonumber(redis.call('HGET', KEYS[5], owner) or '1'))
local window = math.max(1, math.floor(tonumber(ARGV[1]) / active))
while inflight < window and published < n do
  table.insert(out, published)
  redis.call('ZADD', KEYS[3], now + tonumber(ARGV[2]), 'w' .. published)
  published = published + 1
  inflight = inflight + 1
end
redis.call('HSET', KEYS[1], 'published', published, 'inflight', inflight)
return out
"""

# ARGV: id, ttl. Cancels every start chunk that has not started; running ones stop at their
# next start. Returns the state after the call: cancelled | cancelling | summarising |
# missing | the terminal state it already had.
CANCEL = _COMMON + """
local id, now, ttl = ARGV[1], redis_now(), tonumber(ARGV[2])
local state = redis.call('HGET', KEYS[1], 'state')
if not state then return 'missing' end
if state ~= 'queued' and state ~= 'running' then return state end
if redis.call('HGET', KEYS[1], 'cancel') == '1' then return 'cancelling' end
local n = n_chunks()
if tonumber(redis.call('HGET', KEYS[1], 'finished_chunks')) >= n then return 'summarising' end
redis.call('HSET', KEYS[1], 'cancel', '1')
redis.call('HINCRBY', KEYS[1], 'rev', 1)
local published = tonumber(redis.call('HGET', KEYS[1], 'published'))
for i = 0, published - 1 do
  if not redis.call('HGET', KEYS[2], 's' .. i) then close_chunk(i, 'c', 'cancelled', size(i), true) end
end
if published < n then  -- never published: settle them in bulk
  local cs = tonumber(redis.call('HGET', KEYS[1], 'chunk_size'))
  local total = tonumber(redis.call('HGET', KEYS[1], 'total'))
  redis.call('HINCRBY', KEYS[1], 'cancelled', total - published * cs)
  redis.call('HINCRBY', KEYS[1], 'finished_chunks', n - published)
  redis.call('HSET', KEYS[1], 'published', n)
end
if starts_settled(id, now, ttl) == 1 then return 'cancelled' end
return 'cancelling'
"""

# ARGV: id, ttl, stale_seconds. Running units (chunks or the summary) whose lease expired go
# back to waiting (or to cancelled when a cancel was asked for); waiting units not claimed
# within stale_seconds of publication are published again. Returns the indexes to publish.
REQUEUE = _COMMON + """
local id, now, ttl, stale = ARGV[1], redis_now(), tonumber(ARGV[2]), tonumber(ARGV[3])
local state = redis.call('HGET', KEYS[1], 'state')
if state ~= 'queued' and state ~= 'running' then return {} end
local n = n_chunks()
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
    if redis.call('HGET', KEYS[1], 'cancel') == '1' and i < n then
      close_chunk(i, 'c', 'cancelled', size(i), true)
    else
      redis.call('HDEL', KEYS[2], 's' .. i)
      redis.call('ZREM', KEYS[3], member)
      redis.call('ZADD', KEYS[3], now + stale, 'w' .. i)
      table.insert(out, i)
    end
  end
end
starts_settled(id, now, ttl)
return out
"""
