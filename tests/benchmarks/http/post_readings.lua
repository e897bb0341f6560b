-- wrk script: POST /v1/readings with a body of `readings_per_request` CSV lines.
-- Each wrk thread feeds series of its own (coldstore/load-<thread>-<k>/temp_c) with
-- times that only move forward, so every reading is accepted (none is late).
-- (`thread_id` is a global set per thread by setup.)
local readings_per_request = 100
local series_per_thread = 10
local counter = 0
local next_id = 0

function setup(thread)
  thread:set("thread_id", next_id)
  next_id = next_id + 1
end

function request()
  counter = counter + 1
  local lines = {}
  for i = 1, readings_per_request do
    local step = (counter - 1) * readings_per_request + i
    local k = step % series_per_thread
    local t = 1772366400 + 60 * math.floor(step / series_per_thread)
    lines[i] = string.format("%d,coldstore/load-%d-%d/temp_c,%.2f", t, thread_id, k,
                             -18.5 + (step % 7) * 0.05)
  end
  return wrk.format("POST", "/v1/readings", {["Content-Type"] = "text/csv"},
                    table.concat(lines, "\n") .. "\n")
end

function done(summary, latency, requests)
  io.write(string.format("readings per request: %d; readings/s: %.0f\n", readings_per_request,
                         summary.requests / (summary.duration / 1e6) * readings_per_request))
end
