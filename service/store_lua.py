"""The Lua scripts of ``service/store.py``: each status change of a record is one script,
so it is atomic and costs one round trip (what each reads and writes is said above it)."""

# KEYS[1] record, KEYS[2] the stored form of the checked body, KEYS[3] raw body; ARGV[1]
# started_at.
# queued (or solving again after a crash) -> solving, one more attempt; returns
# {old status, time_budget, method, body (the stored form if there is one), 1 if it is},
# or false (not queued/solving, or no body left: then nothing changes).
CLAIM = """
local old = redis.call('HGET', KEYS[1], 'status')
if old ~= 'queued' and old ~= 'solving' then return false end
local copy = 1
local body = redis.call('GET', KEYS[2])
if not body then
  copy = 0
  body = redis.call('GET', KEYS[3])
  if not body then return false end
end
redis.call('HSET', KEYS[1], 'status', 'solving', 'started_at', ARGV[1])
redis.call('HINCRBY', KEYS[1], 'version', 1)
redis.call('HINCRBY', KEYS[1], 'attempts', 1)
local f = redis.call('HMGET', KEYS[1], 'time_budget', 'method')
return {old, f[1], f[2], body, copy}
"""

# The metric increments from ARGV[i] on, (op 'i' or 'f', field, amount) triples, into the
# hash KEYS[6] (the end of FINISH and CREATE_FINISHED)
COUNT_FROM = """
while i + 2 <= #ARGV do
  if ARGV[i] == 'f' then
    redis.pcall('HINCRBYFLOAT', KEYS[6], ARGV[i + 1], ARGV[i + 2])
  else
    redis.pcall('HINCRBY', KEYS[6], ARGV[i + 1], ARGV[i + 2])
  end
  i = i + 3
end
"""

# KEYS[1] record, [2] request, [3] result, [4] work copy, [5] done list, [6] metrics hash,
# [7] the global queue-depth set. ARGV[1] allowed old statuses (comma separated), [2] new
# status, [3] retention seconds, [4] '1' to store ARGV[5] as the result, [6] n field pairs
# from ARGV[9], [7] the prefix of the tenants' queue-depth sets, [8] the record's member
# in them, then metric increments as (op 'i' or 'f', field, amount) triples. If the move
# is allowed: store the result, set the fields, free the queue slot, bump the version,
# give every key of the record (and its idempotency record) the retention, push the done
# token, count; returns the old status.
FINISH = (
    """
local old = redis.call('HGET', KEYS[1], 'status')
if not old then return false end
if not string.find(',' .. ARGV[1] .. ',', ',' .. old .. ',', 1, true) then return false end
local ttl = tonumber(ARGV[3])
if ARGV[4] == '1' then redis.call('SET', KEYS[3], ARGV[5], 'EX', ttl) end
redis.call('HSET', KEYS[1], 'status', ARGV[2])
-- the record no longer holds a queue slot (service/limits.py); the tenant's set is named
-- from the record's own tenant field (one Redis, not a cluster: no slot to declare)
local tenant = redis.call('HGET', KEYS[1], 'tenant')
if tenant then redis.call('ZREM', ARGV[7] .. tenant, ARGV[8]) end
redis.call('ZREM', KEYS[7], ARGV[8])
local i = 9
for k = 1, tonumber(ARGV[6]) do
  redis.call('HSET', KEYS[1], ARGV[i], ARGV[i + 1])
  i = i + 2
end
redis.call('HINCRBY', KEYS[1], 'version', 1)
for k = 1, 4 do redis.call('EXPIRE', KEYS[k], ttl) end
local idem = redis.call('HGET', KEYS[1], 'idem_key')
if idem then redis.call('EXPIRE', idem, ttl) end
redis.call('RPUSH', KEYS[5], '1')
redis.call('EXPIRE', KEYS[5], 60)
"""
    + COUNT_FROM
    + """
return old
"""
)

# A record written finished (a plan the API solved in its request), in one script run in
# the MULTI that first SETs its request body (KEYS[2]) and result JSON (KEYS[3]): the
# tenant's request count of this window first (service/limits.py: over the limit, the
# two are deleted and nothing is written), then the Idempotency-Key (bound already: the
# same), then the record, its place in the tenant's index, the done token and the
# metrics. The large values come as the SETs' own arguments: copied into Lua and out again
# they cost Redis about a third more CPU; the record's fields and the metric increments
# come as one JSON text each, a few arguments for the client to write instead of some
# seventy (bench/RESULTS.md, issue 20).
# KEYS[1] record, [2] request, [3] result, [4] done list, [5] the tenant's index, [6]
# metrics hash, [7] the tenant's request counter, [8] the idempotency record. ARGV[1]
# seconds kept, [2] rid, [3] the index's expiry, [4] the index's oldest id kept, [5] the
# request limit ('' when counted already), [6] the counter's expiry, [7] the key's
# binding ('' without a key), [8] the fields as a JSON object of strings, [9] the metric
# increments as a JSON array of [op ('i' or 'f'), field, amount as a string].
# Returns {'ok'}, {'rate', count} or {'bound', binding}.
CREATE_FINISHED = """
if ARGV[5] ~= '' then
  local n = redis.call('INCR', KEYS[7])
  if n == 1 then redis.call('EXPIRE', KEYS[7], ARGV[6]) end
  if n > tonumber(ARGV[5]) then
    redis.call('DEL', KEYS[2], KEYS[3])
    return {'rate', n}
  end
end
local ttl = tonumber(ARGV[1])
if ARGV[7] ~= '' then
  local bound = redis.call('GET', KEYS[8])
  if bound then
    redis.call('DEL', KEYS[2], KEYS[3])
    return {'bound', bound}
  end
  redis.call('SET', KEYS[8], ARGV[7], 'EX', ttl)
end
local flat = {}
for k, v in pairs(cjson.decode(ARGV[8])) do
  flat[#flat + 1] = k
  flat[#flat + 1] = v
end
redis.call('HSET', KEYS[1], unpack(flat))
redis.call('EXPIRE', KEYS[1], ttl)
redis.call('ZADD', KEYS[5], 0, ARGV[2])
redis.call('EXPIRE', KEYS[5], ARGV[3])
redis.call('ZREMRANGEBYLEX', KEYS[5], '-', '(' .. ARGV[4])
redis.call('RPUSH', KEYS[4], '1')
redis.call('EXPIRE', KEYS[4], 60)
for _, c in ipairs(cjson.decode(ARGV[9])) do
  if c[1] == 'f' then
    redis.pcall('HINCRBYFLOAT', KEYS[6], c[2], c[3])
  else
    redis.pcall('HINCRBY', KEYS[6], c[2], c[3])
  end
end
return {'ok'}
"""

# KEYS[1] record; ARGV[1] allowed old statuses (comma separated), ARGV[2] new status,
# ARGV[3..] field, value pairs. Returns the old status, or false when not allowed/missing.
TRANSITION = """
local old = redis.call('HGET', KEYS[1], 'status')
if not old then return false end
if not string.find(',' .. ARGV[1] .. ',', ',' .. old .. ',', 1, true) then return false end
redis.call('HSET', KEYS[1], 'status', ARGV[2])
for i = 3, #ARGV, 2 do redis.call('HSET', KEYS[1], ARGV[i], ARGV[i + 1]) end
redis.call('HINCRBY', KEYS[1], 'version', 1)
return old
"""

# KEYS[1] record. Queued -> cancelled at once; solving -> cancel flag. Returns old status.
CANCEL = """
local old = redis.call('HGET', KEYS[1], 'status')
if not old then return false end
if old == 'queued' then
  redis.call('HSET', KEYS[1], 'status', 'cancelled', 'finished_at', ARGV[1], 'cancel', '1')
  redis.call('HINCRBY', KEYS[1], 'version', 1)
elseif old == 'solving' and redis.call('HGET', KEYS[1], 'cancel') ~= '1' then
  redis.call('HSET', KEYS[1], 'cancel', '1')
  redis.call('HINCRBY', KEYS[1], 'version', 1)
end
return old
"""

# KEYS[1] record; ARGV[1] field, ARGV[2] value: set only while solving (progress updates)
WHILE_SOLVING = """
if redis.call('HGET', KEYS[1], 'status') ~= 'solving' then return 0 end
redis.call('HSET', KEYS[1], ARGV[1], ARGV[2])
redis.call('HINCRBY', KEYS[1], 'version', 1)
return 1
"""
