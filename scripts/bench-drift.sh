#!/usr/bin/env bash
# Wall time and peak memory of the quality engineer's queries on a year of
# one station's shift log, before and after a change, side by side.
#
# On the log that 'go test ./store -run TestScale -scale' seeds (1,000,000
# runs x 6 measurements, 602,000 of them QM-205) it runs, alternately with
# the padline of git ref BEFORE and of this worktree, RUNS times each:
#   padline drift --db LOG --variant QM-205            (the default watch)
#   ... --chart imr | xbar-r | xbar-s | ewma | cusum
#   ... --by station
# timed by /usr/bin/time (elapsed, CPU user+system, maximum resident set),
# and the store's
# last-100,000 trip series (BenchmarkTripSeries, 3 calls per figure). It
# prints min and median of each, the figures the speed targets were set
# against, the targets, and whether both programs printed the same report
# (--json: every group's point count, time span, alarm count, capability,
# first-pass yield, run count and each chart's kind, centre line, limits,
# sigma, alarm count and point count, compared with jq; the report has
# gained fields since the first measurement, such as the one-line verdict and
# the earliest-first alarm list, which the comparison leaves out).
#
# The machine's load average is printed before and after: on a shared
# machine the wall times move with it. CPU seconds move much less: they are
# the work done, summed over both threads (the yield count runs beside the
# series read), and bound the wall time on an idle machine from above.
#
# Usage: bash scripts/bench-drift.sh [LOG]
#   LOG     the seeded log (default /tmp/padline-bench/scale.db); seeded by
#           the BEFORE tree when missing (about 5 minutes). The BEFORE
#           program reads LOG; this one reads a copy, LOG.new, which it
#           migrates to its schema on first open (timed once).
#   BEFORE  git ref of the "before" program (default 4d66d85, the main of
#           the first measurement)
#   RUNS    runs per query and program (default 5)
set -euo pipefail
cd "$(dirname "$0")/.."

log=${1:-/tmp/padline-bench/scale.db}
before=${BEFORE:-4d66d85}
runs=${RUNS:-5}
command -v jq >/dev/null || { echo "bench-drift.sh needs jq (apt-get install jq)"; exit 1; }
work=$(mktemp -d /tmp/padline-bench.XXXXXX)
trap 'rm -rf "$work"' EXIT
mkdir -p "$(dirname "$log")"

echo "building padline and the store benchmark at $before and at this worktree"
git archive "$before" | tar -x -C "$work" --one-top-level=before
(cd "$work/before" && go build -o "$work/padline-before" ./cmd/padline && go test -c -o "$work/store-before.test" ./store)
go build -o "$work/padline-after" ./cmd/padline
go test -c -o "$work/store-after.test" ./store

if [ ! -e "$log" ]; then
	echo "seeding $log with the $before tree (go test ./store -run TestScale -scale)"
	(cd "$work/before" && go test ./store -run TestScale -scale -scale.db="$log" -timeout 60m >/dev/null)
fi
if [ ! -e "$log.new" ]; then
	cp "$log" "$log.new"
	/usr/bin/time -f "%e" -o "$work/migrate" "$work/padline-after" history --db "$log.new" --variant QM-205 --limits-history >/dev/null
	echo "schema migration of the copy: $(cat "$work/migrate") s (once)"
fi

load() { cut -d' ' -f1-3 /proc/loadavg; }
echo "load average before: $(load) on $(nproc) cores"

# stats FILE: min and median of the numbers in FILE.
stats() { sort -g "$1" | awk '{v[NR]=$1} END {m=(NR%2)?v[(NR+1)/2]:(v[NR/2]+v[NR/2+1])/2; printf "%s %s", v[1], m}'; }

declare -A was target
was[default]="2.55–2.80 s, 209 MB"; target[default]="≤ 1 s, ≤ 100 MB"
was[imr]="3.31 s, 298 MB"; target[imr]="≤ 1.5 s"
was[cusum]="1.23 s, 130 MB"; target[cusum]="≤ 1.5 s"
for c in xbar-r xbar-s ewma; do was[$c]="-"; target[$c]="≤ 1.5 s"; done
was[station]="-"; target[station]="≤ 2 s"
was[trips]="151–221 ms"; target[trips]="≤ 100 ms"

row() { printf '%-16s %-18s %-18s %-18s %-18s %-16s %-16s %-5s %s\n' "$@"; }
echo
row query "before wall" "after wall" "before CPU" "after CPU" "before RSS" "after RSS" same "figures then -> target"
row "" "min / median" "min / median" "min / median" "min / median" "min / median" "min / median" "" ""
for q in default imr xbar-r xbar-s ewma cusum station; do
	case $q in
	default) args=() ;;
	station) args=(--by station) ;;
	*) args=(--chart "$q") ;;
	esac
	for side in before after; do : >"$work/$side.wall"; : >"$work/$side.cpu"; : >"$work/$side.rss"; done
	for _ in $(seq "$runs"); do
		for side in before after; do
			db=$log
			[ "$side" = after ] && db=$log.new
			/usr/bin/time -f "%e %U %S %M" -o "$work/t" "$work/padline-$side" drift --db "$db" --variant QM-205 "${args[@]}" --json |
				sed "s#$db#LOG#g" >"$work/$side.json"
			read -r wall user sys rss <"$work/t"
			echo "$wall" >>"$work/$side.wall"
			echo "$user $sys" | awk '{print $1 + $2}' >>"$work/$side.cpu"
			echo "$((rss / 1024))" >>"$work/$side.rss"
		done
	done
	same=no
	for side in before after; do
		jq -c '[.groups[] | {points, first, last, alarm_count, capability, first_pass_yield, runs,
			charts: [.charts[] | {kind, center, lower, upper, sigma, alarms, points}]}]' \
			"$work/$side.json" >"$work/$side.proj"
	done
	cmp -s "$work/before.proj" "$work/after.proj" && same=yes
	read -r bw bwm <<<"$(stats "$work/before.wall")"
	read -r aw awm <<<"$(stats "$work/after.wall")"
	read -r bc bcm <<<"$(stats "$work/before.cpu")"
	read -r ac acm <<<"$(stats "$work/after.cpu")"
	read -r br brm <<<"$(stats "$work/before.rss")"
	read -r ar arm <<<"$(stats "$work/after.rss")"
	row "drift $q" "$bw / $bwm s" "$aw / $awm s" "$bc / $bcm s" "$ac / $acm s" "$br / $brm MB" "$ar / $arm MB" "$same" "${was[$q]} -> ${target[$q]}"
done

for side in before after; do
	db=$log
	[ "$side" = after ] && db=$log.new
	"$work/store-$side.test" -test.run '^$' -test.bench '^BenchmarkTripSeries$' -test.benchtime 3x \
		-test.count "$runs" -scale.db="$db" | awk '/^BenchmarkTripSeries/ {print $3/1e6}' >"$work/$side.trips"
done
read -r bt btm <<<"$(stats "$work/before.trips")"
read -r at atm <<<"$(stats "$work/after.trips")"
row "last 100k trips" "$bt / $btm ms" "$at / $atm ms" "-" "-" "-" "-" "-" "${was[trips]} -> ${target[trips]}"
echo
echo "load average after: $(load)"
