"""Job state transitions as Redis Lua scripts: each change is one atomic step.

queued -> running -> succeeded | failed | cancelled, and queued -> cancelled.
Terminal states are immutable. A running attempt is fenced by its attempt
number: only the holder of the current attempt may heartbeat or finish, so a
redelivered message or a stale worker can never write a second result.

KEYS for every script that moves a job: job hash, the five global state indexes
in the order of ``keys.STATES`` (queued, running, succeeded, failed, cancelled),
the owner's five state indexes in the same order, then extras.

Index sorted sets carry a TTL refreshed on every add (``__INDEX_TTL__``, filled in
by the store from the result TTL), so no key the project writes lives forever
(API keys excepted, by design).

Time comes from Redis (``TIME``) inside every script: leases are written and compared
on one clock, so workers on hosts whose clocks disagree neither requeue a live job
nor keep a dead one. No script takes "now" as an argument.

``published`` (Redis time) marks a job's latest publication (set at create, requeue
and republication); ``gone`` marks when a sweep first saw a queued job whose message
had left the broker's list (see STRANDED).
"""

# Shared Lua helper: the Redis server's clock, in seconds.
_NOW = """
local function redis_now()
  local t = redis.call('TIME')
  return tonumber(t[1]) + tonumber(t[2]) / 1000000
end
"""

# Shared Lua helper: move a job id between state indexes.
_MOVE = _NOW + """
local ORDER = {queued=2, running=3, succeeded=4, failed=5, cancelled=6}
local function move(id, from, to)
  redis.call('ZREM', KEYS[ORDER[from]], id)
  redis.call('ZREM', KEYS[ORDER[from] + 5], id)
  for _, k in ipairs({KEYS[ORDER[to]], KEYS[ORDER[to] + 5]}) do
    redis.call('ZADD', k, 0, id)
    redis.call('EXPIRE', k, __INDEX_TTL__)  -- every key has a TTL; entries outlive no record
  end
end
"""

# ARGV: id, lease_seconds, max_attempts
CLAIM = _MOVE + """
local id, lease, maxa, now = ARGV[1], tonumber(ARGV[2]), tonumber(ARGV[3]), redis_now()
local state = redis.call('HGET', KEYS[1], 'state')
if not state then return {'missing', 0} end
local expired = state == 'running' and tonumber(redis.call('HGET', KEYS[1], 'lease') or '0') < now
if state ~= 'queued' and not expired then return {state, 0} end
local attempt = redis.call('HINCRBY', KEYS[1], 'attempt', 1)
if attempt > maxa then
  redis.call('HSET', KEYS[1], 'state', 'failed', 'outcome', 'worker_lost', 'finished', now,
    'message', 'this job lost its worker ' .. maxa .. ' times (the worker died, or could not reach '
      .. 'Redis for longer than its lease); the job is not retried again. '
      .. 'Check the model for values that overflow, or lower limits.max_wall_seconds')
  redis.call('HINCRBY', KEYS[1], 'rev', 1)
  move(id, state, 'failed')
  return {'exhausted', attempt}
end
redis.call('HSET', KEYS[1], 'state', 'running', 'lease', now + lease, 'cancel', '0')
redis.call('HDEL', KEYS[1], 'gone')
if not redis.call('HGET', KEYS[1], 'started') then redis.call('HSET', KEYS[1], 'started', now) end
redis.call('HINCRBY', KEYS[1], 'rev', 1)
move(id, state, 'running')
return {'claimed', attempt}
"""

# ARGV: id, attempt, lease_seconds, progress ('' = unchanged)
# Returns -1 when the attempt is no longer current (stop work), else the cancel flag.
HEARTBEAT = _NOW + """
if redis.call('HGET', KEYS[1], 'state') ~= 'running' then return -1 end
if redis.call('HGET', KEYS[1], 'attempt') ~= ARGV[2] then return -1 end
redis.call('HSET', KEYS[1], 'lease', redis_now() + tonumber(ARGV[3]))
if ARGV[4] ~= '' and redis.call('HGET', KEYS[1], 'progress') ~= ARGV[4] then
  redis.call('HSET', KEYS[1], 'progress', ARGV[4])
  redis.call('HINCRBY', KEYS[1], 'rev', 1)
end
return tonumber(redis.call('HGET', KEYS[1], 'cancel') or '0')
"""

# KEYS[12]: result key, KEYS[13]: live (partial) result key.
# ARGV: id, attempt, state, outcome, message, summary, ttl, has_result, blob, progress
# (the fraction of the span reached; '' = keep the last heartbeat's).
# Returns 1 when this call wrote the terminal state, 0 when fenced out. The lease is not
# checked: a finish that arrives late (Redis was unreachable) still counts while no other
# attempt has taken over, which is exactly the fence. The live snapshot goes: the result
# (partial or whole) replaces it.
FINISH = _MOVE + """
local id, attempt, now = ARGV[1], ARGV[2], redis_now()
if redis.call('HGET', KEYS[1], 'state') ~= 'running' then return 0 end
if redis.call('HGET', KEYS[1], 'attempt') ~= attempt then return 0 end
local ttl = tonumber(ARGV[7])
if ARGV[8] == '1' then redis.call('SET', KEYS[12], ARGV[9], 'EX', ttl) end
redis.call('DEL', KEYS[13])
redis.call('HINCRBY', KEYS[1], 'writes', 1)  -- evidence for tests: exactly one terminal write
redis.call('HSET', KEYS[1], 'state', ARGV[3], 'outcome', ARGV[4], 'message', ARGV[5],
  'summary', ARGV[6], 'finished', now)
if ARGV[3] == 'succeeded' then
  redis.call('HSET', KEYS[1], 'progress', '1')
elseif ARGV[10] ~= '' then
  redis.call('HSET', KEYS[1], 'progress', ARGV[10])  -- how far a failed or cancelled run got
end
redis.call('HDEL', KEYS[1], 'lease')
redis.call('HINCRBY', KEYS[1], 'rev', 1)
redis.call('EXPIRE', KEYS[1], ttl)
move(id, 'running', ARGV[3])
return 1
"""

# KEYS[1]: job hash, KEYS[2]: live result key. ARGV: attempt, ttl, blob.
# A running attempt's partial result, written only while that attempt is current (a stale
# or finished attempt writes nothing). Returns 1 when written.
LIVE = """
if redis.call('HGET', KEYS[1], 'state') ~= 'running' then return 0 end
if redis.call('HGET', KEYS[1], 'attempt') ~= ARGV[1] then return 0 end
redis.call('SET', KEYS[2], ARGV[3], 'EX', tonumber(ARGV[2]))
return 1
"""

# ARGV: id. Returns the state after the call, or 'cancelling' for a running job.
CANCEL = _MOVE + """
local id, now = ARGV[1], redis_now()
local state = redis.call('HGET', KEYS[1], 'state')
if not state then return 'missing' end
if state == 'queued' then
  redis.call('HSET', KEYS[1], 'state', 'cancelled', 'outcome', 'cancelled', 'finished', now,
    'message', 'cancelled before it started')
  redis.call('HINCRBY', KEYS[1], 'rev', 1)
  move(id, 'queued', 'cancelled')
  return 'cancelled'
end
if state == 'running' then
  if redis.call('HGET', KEYS[1], 'cancel') ~= '1' then
    redis.call('HSET', KEYS[1], 'cancel', '1')
    redis.call('HINCRBY', KEYS[1], 'rev', 1)
  end
  return 'cancelling'
end
return state
"""

# ARGV: id. A running job whose lease expired goes back to queued (returns 1; the caller
# publishes it again), or to cancelled when a cancel was requested (returns 2).
REQUEUE = _MOVE + """
local id, now = ARGV[1], redis_now()
if redis.call('HGET', KEYS[1], 'state') ~= 'running' then return 0 end
if tonumber(redis.call('HGET', KEYS[1], 'lease') or '0') >= now then return 0 end
redis.call('HINCRBY', KEYS[1], 'rev', 1)
if redis.call('HGET', KEYS[1], 'cancel') == '1' then
  redis.call('HSET', KEYS[1], 'state', 'cancelled', 'outcome', 'cancelled', 'finished', now,
    'message', 'cancelled while its worker was lost')
  redis.call('HDEL', KEYS[1], 'lease')
  move(id, 'running', 'cancelled')
  return 2
end
redis.call('HSET', KEYS[1], 'state', 'queued', 'published', now)
redis.call('HDEL', KEYS[1], 'gone')
move(id, 'running', 'queued')
return 1
"""

# KEYS[1]: job hash. Stamps a new job's publication time (run inside create's transaction).
STAMP = _NOW + """
redis.call('HSET', KEYS[1], 'published', redis_now())
return 1
"""

# KEYS[1]: job hash. ARGV: head, grace, created.
# ``head``: publication time of the oldest message still in the broker's list ('' when the
# list is empty); ``created``: the job's creation time, for records without ``published``.
# The list is first in, first out: a queued job published before the head has had its
# message taken from the list, so a worker holds it or it was lost (prefetched by a killed
# worker, or dropped by a broker crash). The first sweep that sees this marks ``gone``; a
# sweep at least ``grace`` seconds later that still sees it republishes (returns 1, stamps
# ``published``). A job whose message is still in the list (published at or after the
# head) is never republished, however long the queue.
STRANDED = _NOW + """
if redis.call('HGET', KEYS[1], 'state') ~= 'queued' then return 0 end
local now = redis_now()
local head = tonumber(ARGV[1]) or now
local published = tonumber(redis.call('HGET', KEYS[1], 'published') or ARGV[3])
if published >= head then
  redis.call('HDEL', KEYS[1], 'gone')
  return 0
end
local gone = tonumber(redis.call('HGET', KEYS[1], 'gone') or '')
if not gone then
  redis.call('HSET', KEYS[1], 'gone', now)
  return 0
end
if now - gone < tonumber(ARGV[2]) then return 0 end
redis.call('HSET', KEYS[1], 'published', now)
redis.call('HDEL', KEYS[1], 'gone')
return 1
"""
