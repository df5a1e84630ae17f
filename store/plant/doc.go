// Package plant is the plant store: one PostgreSQL database that every
// station forwards its committed runs to, and that plant-wide history,
// drift and the line board read. Each station's SQLite shift log (package
// store) stays the source of truth; the plant store is a copy that the
// forwarder keeps exactly once.
//
// It is, with store, the only padline package that runs SQL; it talks to
// PostgreSQL through github.com/jackc/pgx/v5. Of padline it imports store
// (the run, filter and trip-point types, and the station's outbox),
// sequences, and store/drift (the line board's open alarms); it must not
// import fixture or cmd.
//
// # Schema
//
// migrations/NNNN_*.sql are embedded and applied by Migrate in order, one
// transaction each, under an advisory lock, with the version in the table
// plant_schema. Runs and measurements are partitioned by calendar month
// (UTC) of the station's finish time; partitions are created on demand by
// plant_ensure_month. Each serial's first unit verdict in the plant
// (serial_first) and on each station (serial_station_first) is kept as runs
// arrive, for first-pass yield (DEVELOPERS.md "Plant-wide first-pass
// yield"). A run is identified across the plant by its shift log's uuid
// and its id in that log, so a replayed batch never duplicates.
//
// # Who may write what
//
// A station logs in as its own PostgreSQL role (AddStation creates it);
// row-level security lets that role read and write rows of its own station
// only, so a station cannot write under another station's id. The plant
// administrator (the schema owner) is not bound by the policies.
//
// # Times
//
// Times are integer nanoseconds since the Unix epoch, UTC. Per run the
// store keeps the station's finish time, the server's receive time, and
// at: the finish time corrected by the station's clock offset as measured
// when the batch arrived. Plant queries order and filter by at.
package plant
