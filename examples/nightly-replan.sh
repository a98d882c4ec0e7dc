#!/usr/bin/env bash
# Nightly replan of a bandwright frequency plan, meant for cron, e.g.
#
#   15 2 * * *  PLAN_DIR=/srv/planning /srv/planning/nightly-replan.sh >>/var/log/bandwright-nightly.log 2>&1
#
# It replans REQUEST against last-plan.json (the plan on air) and writes new-plan.json.
# Only a plan that serves every demand (exit 0) replaces last-plan.json; on any other outcome the
# previous plan stays in place and the new result is kept beside it for a planner to look at.
#
# Exit codes (those of `bandwright replan`, passed on):
#   0 every demand served: new plan adopted      3 some demands unserved: kept for review
#   4 infeasible: previous plan kept             2 invalid input: previous plan kept
#   5 server unreachable (after retries)         1 anything else (lock held, unexpected error)
#
# Environment, all optional:
#   PLAN_DIR           working directory with last-plan.json (default: this script's directory)
#   REQUEST            replan request (default: $PLAN_DIR/replan-request.json)
#   BANDWRIGHT_SERVER  service URL; unset: the plan is computed on this machine
#   BANDWRIGHT_BIN     the bandwright command (default: bandwright on PATH)
#   RETRIES            extra attempts when the server is unreachable (default 2)
#   RETRY_DELAY_S      seconds between those attempts (default 300)
#   NOTIFY_CMD         executable called with a one-line summary as its only argument
set -euo pipefail

script_dir="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
plan_dir="${PLAN_DIR:-$script_dir}"
request="${REQUEST:-$plan_dir/replan-request.json}"
bandwright="${BANDWRIGHT_BIN:-bandwright}"
retries="${RETRIES:-2}"
retry_delay_s="${RETRY_DELAY_S:-300}"

last_plan="$plan_dir/last-plan.json"
new_plan="$plan_dir/new-plan.json"
archive_dir="$plan_dir/archive"
stamp="$(date -u +%Y%m%dT%H%M%SZ)"

log() {
    printf '%s nightly-replan: %s\n' "$(date -u +%Y-%m-%dT%H:%M:%SZ)" "$*" >&2
}

notify() {
    log "$*"
    if [[ -n "${NOTIFY_CMD:-}" ]]; then
        "$NOTIFY_CMD" "bandwright nightly replan: $*" || log "NOTIFY_CMD failed"
    fi
}

# One run at a time: a slow solve must not overlap the next night's run.
if command -v flock >/dev/null 2>&1; then
    exec 9>"$plan_dir/.nightly-replan.lock"
    if ! flock -n 9; then
        log "another run holds $plan_dir/.nightly-replan.lock; nothing done"
        exit 1
    fi
fi

if [[ ! -f "$last_plan" ]]; then
    notify "no previous plan at $last_plan; run 'bandwright plan' once and save it there"
    exit 2
fi
if [[ ! -f "$request" ]]; then
    notify "no request at $request"
    exit 2
fi

# previous_plan_id in the request is left null: `--previous` fills it (and the demands'
# current settings) from last-plan.json.
args=(replan "$request" --previous "$last_plan" -o "$plan_dir/.candidate.json")
if [[ -n "${BANDWRIGHT_SERVER:-}" ]]; then
    args+=(--server "$BANDWRIGHT_SERVER")
fi

run_replan() {
    local status=0
    "$bandwright" "${args[@]}" >"$plan_dir/new-plan.summary.txt" || status=$?
    return "$status"
}

attempt=0
status=0
while :; do
    status=0
    run_replan || status=$?
    if [[ "$status" -ne 5 || "$attempt" -ge "$retries" ]]; then
        break
    fi
    attempt=$((attempt + 1))
    log "server unreachable; attempt $attempt of $retries again in ${retry_delay_s}s"
    sleep "$retry_delay_s"
done

keep_candidate_as() {
    if [[ -f "$plan_dir/.candidate.json" ]]; then
        mv -f "$plan_dir/.candidate.json" "$1"
    fi
}

# The summary's last line says which carriers move ("retuned K of N carriers: a, b").
retunes="$(grep -m1 '^retuned ' "$plan_dir/new-plan.summary.txt" 2>/dev/null || true)"

case "$status" in
    0)
        if [[ ! -f "$plan_dir/.candidate.json" ]]; then
            notify "bandwright reported success but wrote no plan; last-plan.json kept"
            exit 1
        fi
        mkdir -p "$archive_dir"
        cp -p "$last_plan" "$archive_dir/plan-before-$stamp.json"
        keep_candidate_as "$new_plan"
        cp -p "$new_plan" "$plan_dir/.last-plan.tmp"
        mv -f "$plan_dir/.last-plan.tmp" "$last_plan"
        notify "every demand served; new plan adopted (previous archived as plan-before-$stamp.json); ${retunes:-no retune line}"
        ;;
    3)
        keep_candidate_as "$new_plan"
        notify "some demands unserved; last-plan.json kept, review $new_plan before adopting it; ${retunes:-no retune line}"
        ;;
    4)
        keep_candidate_as "$plan_dir/infeasible-$stamp.json"
        notify "no feasible plan; last-plan.json kept (result in infeasible-$stamp.json)"
        ;;
    2)
        rm -f "$plan_dir/.candidate.json"
        notify "invalid input in $request or $last_plan; last-plan.json kept (see the log)"
        ;;
    5)
        rm -f "$plan_dir/.candidate.json"
        notify "the server was unreachable after $((retries + 1)) attempts; last-plan.json kept"
        ;;
    *)
        rm -f "$plan_dir/.candidate.json"
        notify "bandwright replan failed with exit code $status; last-plan.json kept"
        ;;
esac
exit "$status"
