// Package store is the SQLite shift log: schema, embedded migrations, run
// writes and history queries. It is the only padline package that imports
// database/sql and the SQLite driver.
package store
