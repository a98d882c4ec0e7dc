#!/usr/bin/env bash
# Every endpoint of the bandwright HTTP API, called with curl in a sensible order.
#
# Start a service first (`bandwright serve`), then:
#
#   examples/curl.sh [BASE_URL]          # default http://127.0.0.1:8000
#
# Pictures and plans are written to $OUT_DIR (default ./out).  Needs curl and python3 (only to
# read fields out of JSON answers).  The demo request may take a minute to solve on a small
# machine; the synchronous POST /v1/plans waits for it.
set -euo pipefail

base_url="${1:-${BANDWRIGHT_URL:-http://127.0.0.1:8000}}"
here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
out_dir="${OUT_DIR:-./out}"
mkdir -p "$out_dir"

curl_json=(curl --fail-with-body --silent --show-error --max-time 600
    -H "Accept: application/json")

step() {
    printf '\n== %s\n' "$*" >&2
}

# field NAME: print a top-level field of the JSON document on stdin (objects as JSON).
field() {
    python3 -c '
import json, sys
value = json.load(sys.stdin)[sys.argv[1]]
print(value if isinstance(value, str) else json.dumps(value, indent=2))
' "$1"
}

step "GET /healthz (liveness: the process answers)"
"${curl_json[@]}" "$base_url/healthz"
echo

step "GET /readyz (readiness: the plan store answers; 503 while it does not)"
"${curl_json[@]}" "$base_url/readyz"
echo

step "GET /metrics (Prometheus text; first lines)"
curl --fail --silent --show-error "$base_url/metrics" | head -n 15 || true

step "GET /v1/modcods (catalogue with required Es/N0 for these coding parameters)"
"${curl_json[@]}" -G "$base_url/v1/modcods" \
    --data-urlencode "block_length_bits=16200" \
    --data-urlencode "target_block_error_rate=1e-5" \
    --data-urlencode "implementation_loss_db=1.0" \
    --data-urlencode "modulation=QPSK" \
    --data-urlencode "modulation=8PSK"
echo

step "POST /v1/carriers/evaluate (one carrier configuration)"
"${curl_json[@]}" -X POST "$base_url/v1/carriers/evaluate" \
    -H "Content-Type: application/json" \
    --data-binary @- <<'JSON'
{
  "symbol_rate_baud": 2000000.0,
  "rolloff": 0.2,
  "modulation": "16APSK",
  "code_rate": "3/4",
  "filter_span_symbols": 12,
  "window": "none",
  "amplifier": {"model": "rapp", "smoothness": 2.0, "output_backoff_db": 6.0},
  "cn0_dbhz": 80.0,
  "margin_db": 3.0,
  "gaps_hz": [0.0, 50000.0, 100000.0, 200000.0],
  "leakage_limit_db": 30.0
}
JSON
echo

step "POST /v1/plans:validate (dry run: the same checks, and the size; nothing solved or stored)"
"${curl_json[@]}" -X POST "$base_url/v1/plans:validate" \
    -H "Content-Type: application/json" \
    --data-binary "@$here/demo-request.json"
echo

step "POST /v1/plans (solve and store; 201 with Location)"
plan_json="$out_dir/demo-plan.json"
"${curl_json[@]}" -X POST "$base_url/v1/plans" \
    -H "Content-Type: application/json" \
    --data-binary "@$here/demo-request.json" \
    -D "$out_dir/demo-plan.headers" -o "$plan_json"
grep -i '^location:' "$out_dir/demo-plan.headers" >&2 || true
plan_id="$(field id <"$plan_json")"
echo "plan id: $plan_id (status $(field status <"$plan_json"))"

step "GET /v1/plans/$plan_id"
"${curl_json[@]}" "$base_url/v1/plans/$plan_id" | field summary

step "GET /v1/plans?offset=0&limit=5 (newest first)"
"${curl_json[@]}" "$base_url/v1/plans?offset=0&limit=5"
echo

step "GET /v1/plans/$plan_id/spectrum.svg and spectrum.png"
curl --fail --silent --show-error -o "$out_dir/demo-spectrum.svg" \
    "$base_url/v1/plans/$plan_id/spectrum.svg"
curl --fail --silent --show-error -o "$out_dir/demo-spectrum.png" \
    "$base_url/v1/plans/$plan_id/spectrum.png"
echo "wrote $out_dir/demo-spectrum.svg and $out_dir/demo-spectrum.png"

step "GET /v1/plans/$plan_id/carriers.csv"
curl --fail --silent --show-error -o "$out_dir/demo-carriers.csv" \
    "$base_url/v1/plans/$plan_id/carriers.csv"
echo "wrote $out_dir/demo-carriers.csv"

step "POST /v1/plans/$plan_id/what-if (changes tried on the stored plan; not stored)"
"${curl_json[@]}" -X POST "$base_url/v1/plans/$plan_id/what-if" \
    -H "Content-Type: application/json" \
    --data-binary "@$here/what-if-changes.json" | field difference

step "POST /v1/jobs (the next-day replan as a background job; 202 with Location)"
# Fill the request's previous_plan_id placeholder (null in the file) with the stored plan's id.
python3 - "$here/replan-request.json" "$plan_id" >"$out_dir/replan-request.filled.json" <<'PY'
import json, sys

request = json.load(open(sys.argv[1], encoding="utf-8"))
request["previous_plan_id"] = sys.argv[2]
json.dump(request, sys.stdout, indent=2)
PY
job_json="$("${curl_json[@]}" -X POST "$base_url/v1/jobs" \
    -H "Content-Type: application/json" \
    --data-binary "@$out_dir/replan-request.filled.json")"
job_id="$(field id <<<"$job_json")"
echo "job id: $job_id"

step "GET /v1/jobs/$job_id (poll until done or failed)"
while :; do
    job_json="$("${curl_json[@]}" "$base_url/v1/jobs/$job_id")"
    state="$(field state <<<"$job_json")"
    echo "state: $state" >&2
    if [[ "$state" == "done" || "$state" == "failed" ]]; then
        break
    fi
    sleep 2
done
echo "$job_json"
if [[ "$state" != "done" ]]; then
    exit 1
fi
replan_id="$(field plan_id <<<"$job_json")"

step "GET /v1/plans/$replan_id/retunes (what moved relative to the parent plan)"
"${curl_json[@]}" "$base_url/v1/plans/$replan_id/retunes"
echo
