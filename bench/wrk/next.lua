-- wrk script for issue 6, figure 4: POST /v1/next with varied sessions.
--
-- WRK_BODIES names a file of request bodies, one JSON object per line
-- ({"items":[...],"k":10}); each thread walks it from its own random start,
-- so sessions of 1 to 20 clicks over the whole catalogue alternate.
-- WRK_DELAY_MS > 0 paces every connection (a pause after each response),
-- for latency at a fixed fraction of the peak rate. done() prints one
-- WRK_RESULT line (latencies in microseconds) for bench/cmd/http to parse.

local bodies = {}
local path = os.getenv("WRK_BODIES")
if path == nil then error("set WRK_BODIES to a file of request bodies") end
for line in io.lines(path) do bodies[#bodies + 1] = line end
local n = #bodies
local i = 0
local headers = { ["Content-Type"] = "application/json" }

local d = tonumber(os.getenv("WRK_DELAY_MS") or "0")
if d > 0 then
  function delay() return d end
end

local threads = 0
function setup(thread)
  threads = threads + 1
  thread:set("id", threads)
end

function init(args)
  i = ((id or 1) * 7919) % n
end

function request()
  i = i % n + 1
  return wrk.format("POST", "/v1/next", headers, bodies[i])
end

function done(summary, latency, requests)
  local e = summary.errors
  io.write(string.format(
    "WRK_RESULT requests=%d duration_us=%d errors=%d p50=%d p90=%d p99=%d p999=%d max=%d mean=%.1f\n",
    summary.requests, summary.duration, e.connect + e.read + e.write + e.status + e.timeout,
    latency:percentile(50), latency:percentile(90), latency:percentile(99), latency:percentile(99.9),
    latency.max, latency.mean))
end
