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
"""

# Shared Lua helper: move a job id between state indexes.
_MOVE = """
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

# ARGV: id, now, lease_seconds, max_attempts
CLAIM = _MOVE + """
local id, now, lease, maxa = ARGV[1], tonumber(ARGV[2]), tonumber(ARGV[3]), tonumber(ARGV[4])
local state = redis.call('HGET', KEYS[1], 'state')
if not state then return {'missing', 0} end
local expired = state == 'running' and tonumber(redis.call('HGET', KEYS[1], 'lease') or '0') < now
if state ~= 'queued' and not expired then return {state, 0} end
local attempt = redis.call('HINCRBY', KEYS[1], 'attempt', 1)
if attempt > maxa then
  redis.call('HSET', KEYS[1], 'state', 'failed', 'outcome', 'worker_lost', 'finished', now,
    'message', 'the worker running this job died ' .. maxa .. ' times; the job is not retried again. '
      .. 'Check the model for values that overflow, or lower limits.max_wall_seconds')
  redis.call('HINCRBY', KEYS[1], 'rev', 1)
  move(id, state, 'failed')
  return {'exhausted', attempt}
end
redis.call('HSET', KEYS[1], 'state', 'running', 'lease', now + lease, 'cancel', '0')
if not redis.call('HGET', KEYS[1], 'started') then redis.call('HSET', KEYS[1], 'started', now) end
redis.call('HINCRBY', KEYS[1], 'rev', 1)
move(id, state, 'running')
return {'claimed', attempt}
"""

# ARGV: id, attempt, now, lease_seconds, progress ('' = unchanged)
# Returns -1 when the attempt is no longer current (stop work), else the cancel flag.
HEARTBEAT = """
if redis.call('HGET', KEYS[1], 'state') ~= 'running' then return -1 end
if redis.call('HGET', KEYS[1], 'attempt') ~= ARGV[2] then return -1 end
redis.call('HSET', KEYS[1], 'lease', tonumber(ARGV[3]) + tonumber(ARGV[4]))
if ARGV[5] ~= '' and redis.call('HGET', KEYS[1], 'progress') ~= ARGV[5] then
  redis.call('HSET', KEYS[1], 'progress', ARGV[5])
  redis.call('HINCRBY', KEYS[1], 'rev', 1)
end
return tonumber(redis.call('HGET', KEYS[1], 'cancel') or '0')
"""

# KEYS[12]: result key. ARGV: id, attempt, now, state, outcome, message, summary, ttl, has_result, blob
# Returns 1 when this call wrote the terminal state, 0 when fenced out.
FINISH = _MOVE + """
local id, attempt, now = ARGV[1], ARGV[2], ARGV[3]
if redis.call('HGET', KEYS[1], 'state') ~= 'running' then return 0 end
if redis.call('HGET', KEYS[1], 'attempt') ~= attempt then return 0 end
local ttl = tonumber(ARGV[8])
if ARGV[9] == '1' then redis.call('SET', KEYS[12], ARGV[10], 'EX', ttl) end
redis.call('HINCRBY', KEYS[1], 'writes', 1)  -- evidence for tests: exactly one terminal write
redis.call('HSET', KEYS[1], 'state', ARGV[4], 'outcome', ARGV[5], 'message', ARGV[6],
  'summary', ARGV[7], 'finished', now)
if ARGV[4] == 'succeeded' then redis.call('HSET', KEYS[1], 'progress', '1') end
redis.call('HDEL', KEYS[1], 'lease')
redis.call('HINCRBY', KEYS[1], 'rev', 1)
redis.call('EXPIRE', KEYS[1], ttl)
move(id, 'running', ARGV[4])
return 1
"""

# ARGV: id, now. Returns the state after the call, or 'cancelling' for a running job.
CANCEL = _MOVE + """
local id, now = ARGV[1], ARGV[2]
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

# ARGV: id, now. A running job whose lease expired goes back to queued (returns 1),
# or to cancelled when a cancel was requested (returns 2).
REQUEUE = _MOVE + """
local id, now = ARGV[1], tonumber(ARGV[2])
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
redis.call('HSET', KEYS[1], 'state', 'queued')
move(id, 'running', 'queued')
return 1
"""
