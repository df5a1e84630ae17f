// Package planttest is the tests' way to the plant store: the test
// PostgreSQL server, a migrated schema of a test's own that is dropped
// after it, and the skip-or-fail rule for a missing server (DEVELOPERS.md
// "Package map"). Only tests and benchmarks import it.
package planttest

import (
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"padline/store/plant"
)

// Need skips a test whose outside part is missing, with reason; under
// PADLINE_REQUIRE_PARTS=1 (.ci/run) it fails the test instead.
func Need(t testing.TB, reason string) {
	t.Helper()
	if os.Getenv("PADLINE_REQUIRE_PARTS") == "1" {
		t.Fatalf("%s", reason)
	}
	t.Skip(reason)
}

// BaseURL is the test PostgreSQL server: PADLINE_TEST_PG, else the project
// machines' server at 127.0.0.1:5432, database test.
func BaseURL() string {
	if u := os.Getenv("PADLINE_TEST_PG"); u != "" {
		return u
	}
	return "postgres://root@127.0.0.1:5432/test?sslmode=disable"
}

// WithParam adds the connection parameter kv ("key=value") to url.
func WithParam(url, kv string) string {
	if strings.Contains(url, "?") {
		return url + "&" + kv
	}
	return url + "?" + kv
}

// Schema creates a schema of the test's own on the server at base (named
// prefix, a time and a random number), migrates it through plant.Migrate,
// and after the test drops it and the roles made for it (AddStation's and
// AddReader's, named after the schema). It returns the URL that works in
// that schema and the schema's name. A server that does not answer is
// Need's case.
func Schema(t testing.TB, base, prefix string) (url, schema string) {
	t.Helper()
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, base)
	if err != nil {
		Need(t, "no PostgreSQL at "+base+": "+err.Error())
	}
	defer conn.Close(ctx)
	schema = fmt.Sprintf("%s%d_%d", prefix, time.Now().UnixNano()%1e9, rand.IntN(1e6))
	if _, err := conn.Exec(ctx, "CREATE SCHEMA "+schema); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { drop(t, base, schema) })
	url = WithParam(base, "search_path="+schema)
	db, err := plant.Open(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if err := db.Migrate(ctx); err != nil {
		t.Fatal(err)
	}
	return url, schema
}

// drop removes schema and the roles named after it; what fails is logged,
// not fatal (the test's verdict is already made).
func drop(t testing.TB, base, schema string) {
	ctx := context.Background()
	c, err := pgx.Connect(ctx, base)
	if err != nil {
		t.Logf("drop schema %s: %v", schema, err)
		return
	}
	defer c.Close(ctx)
	if _, err := c.Exec(ctx, "DROP SCHEMA "+schema+" CASCADE"); err != nil {
		t.Logf("drop schema %s: %v", schema, err)
	}
	rows, _ := c.Query(ctx, "SELECT rolname FROM pg_roles WHERE rolname LIKE $1", schema+"_%")
	roles, _ := pgx.CollectRows(rows, pgx.RowTo[string])
	for _, r := range roles {
		c.Exec(ctx, "DROP OWNED BY "+r)
		c.Exec(ctx, "DROP ROLE "+r)
	}
}

// URL is Schema on BaseURL, for a test that needs only the URL.
func URL(t testing.TB, prefix string) string {
	t.Helper()
	url, _ := Schema(t, BaseURL(), prefix)
	return url
}
