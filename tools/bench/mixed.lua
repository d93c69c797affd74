-- wrk script for tools/bench/load.sh: a mix of what plants and dashboards send.
-- Per thread, in a repeating cycle of 20 requests: 2 plant PUTs of one day's counts
-- (each a write), 1 CSV batch of 20 records, 8 report polls with
-- If-None-Match, 5 report reads without it, 4 report page views. Keys, the ETag and
-- the page cookie come from the environment (load.sh sets them).
local ingest = os.getenv("INGEST_KEY")
local read = os.getenv("READ_KEY")
local etag = os.getenv("ETAG")
local cookie = os.getenv("PAGE_COOKIE")
local counter = 0
-- Globals, so setup() can set them per thread and done() can read them back.
thread_id = 0
s2xx, s304, s429, s4xx, s5xx = 0, 0, 0, 0, 0
local threads = {}

function setup(thread)
  thread:set("thread_id", #threads)
  table.insert(threads, thread)
end

local function day(n)
  -- Days from 2030-01-01 on: never in the demo data.
  return os.date("!%Y-%m-%d", 1893456000 + n * 86400)
end

local reports = {
  "/v1/reports?period=2026-W16&level=site",
  "/v1/reports?period=2026-W09&level=line&site=MRQ",
  "/v1/reports?period=2026-04&level=site",
  "/v1/reports/series?from=2026-W10&to=2026-W20&level=site",
}

function request()
  counter = counter + 1
  local slot = counter % 20
  -- Thread 0 writes KES, thread 1 MRQ (each has lines L1 and L2): PUTs on L1, batches
  -- on L2, one new day each time (a correction once the 25,000 days from 2030 are used).
  local site = (thread_id % 2 == 0) and "KES" or "MRQ"
  if slot < 2 then
    return wrk.format("PUT", "/v1/sites/" .. site .. "/lines/L1/days/" .. day(counter % 25000),
      {["Authorization"] = "Bearer " .. ingest, ["Content-Type"] = "application/json"},
      '{"inspected": ' .. (9000 + counter % 500) .. ', "defective": ' .. (counter % 60) .. '}')
  elseif slot == 2 then
    local rows = {"site,line,date,inspected,defective"}
    for i = 0, 19 do
      rows[#rows + 1] = site .. ",L2," .. day((counter * 20 + i) % 25000) .. ",8000," .. (i % 40)
    end
    return wrk.format("POST", "/v1/counts",
      {["Authorization"] = "Bearer " .. ingest, ["Content-Type"] = "text/csv"},
      table.concat(rows, "\n") .. "\n")
  elseif slot < 11 then
    return wrk.format("GET", reports[1],
      {["Authorization"] = "Bearer " .. read, ["If-None-Match"] = etag})
  elseif slot < 16 then
    return wrk.format("GET", reports[1 + counter % #reports],
      {["Authorization"] = "Bearer " .. read})
  else
    return wrk.format("GET", "/report?period=2026-W16&level=site", {["Cookie"] = cookie})
  end
end

function response(status, headers, body)
  if status == 304 then s304 = s304 + 1
  elseif status == 429 then s429 = s429 + 1
  elseif status >= 500 then s5xx = s5xx + 1
  elseif status >= 400 then s4xx = s4xx + 1
  else s2xx = s2xx + 1 end
end

function done(summary, latency, requests)
  io.write(string.format("requests %d in %.1f s: %.0f req/s; latency p50 %.2f ms, p99 %.2f ms, max %.2f ms\n",
    summary.requests, summary.duration / 1e6, summary.requests / (summary.duration / 1e6),
    latency:percentile(50) / 1000, latency:percentile(99) / 1000, latency.max / 1000))
  local t = {s2xx = 0, s304 = 0, s429 = 0, s4xx = 0, s5xx = 0}
  for _, thread in ipairs(threads) do
    for k, _ in pairs(t) do t[k] = t[k] + thread:get(k) end
  end
  io.write(string.format("answers: 2xx %d, 304 %d, 429 %d, other 4xx %d, 5xx %d\n",
    t.s2xx, t.s304, t.s429, t.s4xx, t.s5xx))
  io.write(string.format("socket errors: connect %d, read %d, write %d, timeout %d\n",
    summary.errors.connect, summary.errors.read, summary.errors.write, summary.errors.timeout))
end
