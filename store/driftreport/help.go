package driftreport

// Help is the long help of `padline drift`.
const Help = `drift asks the shift log whether a variant's trip points are moving: a new reel
of sense resistors, another pad laminate, a humid afternoon or a wearing relay
moves them long before units start to fail.

It reads the trip-point series of --variant (oldest first, narrowed by
--since/--until, --station-id, --fixture, --lot, --last N), estimates the centre and σ
from a baseline window (phase I: the first --baseline points, always
printed), applies those limits to the whole series (phase II), and lists the
alarms numbered as on the chart, with the unit index, run time and serial.

Charts (--chart):
  watch    the default watch: individuals with the 3σ limit alone (large
           jumps at once) plus the tabular CUSUM (k = 0.5σ, h = 5σ: small
           steps); in-control ARL about 450 with a 50-point baseline, a 1σ
           step flagged after a median of 9 units (see 'padline drift study')
  imr      individuals and moving range, with the run rules of --rules
  xbar-r   subgroup means and ranges, --subgroup N consecutive units (2…10)
  xbar-s   subgroup means and standard deviations
  ewma     EWMA with exact time-varying limits (--lambda, --width as L)
  cusum    tabular CUSUM (--k, --h in σ)
--rules picks the run rules on the individuals / X̄ chart: we (Western
Electric, default for imr and xbar), nelson, or limits (3σ only; the watch).

Capability Cp/Cpk (σ within subgroups) and Pp/Ppk (overall σ) are against
the variant's test limits, computed as 'padline limits' does from the
variant's configuration (the latest one in the shift log, else the built-in
or file of that name) with the station's uncertainty U (--uncertainty-pf,
else the --station-file station's: the budget its last study stored in the
shift log, else its file's uncertainty_pf; else the stand-in 0.3 pF), the
same U 'padline run' judged with; --lsl/--usl override
them. First-pass yield (each serial's first unit verdict) comes with its
exact Clopper–Pearson 95 % interval.

--by station|fixture|lot|shift|site reports each group on its own (shifts:
early 06–14, late 14–22, night 22–06 local time, named by the day they
start; sites: the board positions of a panel station, one chart per site).
On the plant store also --by line.

--csv FILE --column NAME analyses a column of numbers from a CSV file with a
header row instead (blank cells are skipped); --target, --sigma, --k, --h,
--lambda and --width override what would be estimated.

--svg FILE and/or --png FILE render the charts: x in time of day with the
shift changes dotted (--x serial or point for test order), each run of
alarms marked once (its first alarm ringed, its span barred, numbered as
listed), a CUSUM drawn to ±3h so its decision interval stays readable; with
--by, the groups side by side in one picture on one time axis. From the
shift log, FILE-pareto and FILE-yield come beside it: the fail-code Pareto
and the first-pass yield by hour with 95 % intervals. --json prints one
JSON object.

The shift log is found as 'padline history' finds it: --db, $PADLINE_DB,
the --station-file's shift_log, else ./padline-shift.db. --db
postgres://… reads the plant store: every station's forwarded runs, ordered
by the plant's clock; for one station's runs the numbers are that station's
own log's. There a serial's first unit verdict is its first on the station
with --station-id or --by station, else its first in the plant.`

// Example is the examples of `padline drift`.
const Example = `  padline drift --variant QM-205
  padline drift --variant QM-205 --since 8h --svg drift.svg
  padline drift --variant QM-205 --by fixture --chart xbar-r --subgroup 5
  padline drift --variant QM-205 --chart ewma --lambda 0.1 --json
  padline drift --csv bench.csv --column trip_pf --target 29.7 --sigma 4.2
  padline drift --db postgres://quality@plant-db/plant --variant QM-205 --by station
  padline drift study --runs 5000`

// BaselineHelp is the long help of `padline drift baseline`.
const BaselineHelp = `Without an approved baseline, 'padline drift' takes its limits from the first
--baseline points of whatever window is selected (a provisional baseline: a
window that starts after a step shows no drift). 'baseline set' computes the
centre (mean) and σ (MR̄/d2) of the variant's passed units' trip points over a
window you name and stores them, approved, in the shift log; from then on
'padline drift --variant V' charts against them unless --baseline, --target
or --sigma is given.

--last-approved takes the units judged against the variant's limits version
approved last (see 'padline limits pending'): its station and fixture, from
its approval until now. A log without limits versions (the demo's) takes
the window of the variant's most recently approved baseline record instead,
approving what the log holds for it now (its name kept unless --name).

With --db postgres://… the baseline is computed over the plant's runs and
stored in the plant store, where 'padline drift --db postgres://…' uses it
(as the schema owner: station and reader roles may only read baselines).
Baselines are not forwarded from stations; each database keeps the ones
approved on it, and on the plant --last-approved takes the last approved
baseline's window.`

// BaselineExample is the examples of `padline drift baseline set`.
const BaselineExample = `  padline drift baseline set --variant QM-205 --since "2026-11-30 06:00" --until "2026-11-30 14:00" --name "laminate A" --approved-by ana
  padline drift --variant QM-205          # now charts against "laminate A"
  padline drift baseline set --variant QM-205 --last-approved --approved-by ana`

// StudyHelp is the long help of `padline drift study`.
const StudyHelp = `study simulates each chart set on independent normal values (known μ and σ,
zero-state: the step from the first point) --runs times per step size (0,
0.5, 1 and 2 σ) and prints the average run length (ARL: units up to and
including the first alarm), its standard error, median and 10/90 %
percentiles, beside a reference ARL where there is one: exact for the
individuals chart, computed with the R package spc (xcusum.arl, xewma.arl)
for the CUSUM and EWMA charts; the source column names it. The same --seed
gives the same table.`
