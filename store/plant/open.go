package plant

import (
	"context"
	"fmt"
	"os"
	"strings"
)

// IsURL reports whether a --db value names the plant store.
func IsURL(s string) bool {
	return strings.HasPrefix(s, "postgres://") || strings.HasPrefix(s, "postgresql://")
}

// OpenMigrated opens the plant store at url and checks that it answers and
// carries the plant schema (readers never create one), for reading
// (readParams).
func OpenMigrated(ctx context.Context, url string) (*DB, error) {
	p, err := open(ctx, url, true)
	if err != nil {
		return nil, err
	}
	v, err := p.Version(ctx)
	if err != nil {
		p.Close()
		return nil, fmt.Errorf("plant store %s: %w", Redact(url), err)
	}
	if v == 0 {
		p.Close()
		return nil, fmt.Errorf("plant store %s has no plant schema (run 'padline plant init --db URL')", Redact(url))
	}
	if err := readable(v); err != nil {
		p.Close()
		return nil, fmt.Errorf("plant store %s: %w", Redact(url), err)
	}
	return p, nil
}

// readable refuses a schema older than the program's: its queries name
// columns and tables the missing migrations add.
func readable(v int) error {
	if v < SchemaVersion() {
		return fmt.Errorf("plant schema at version %d, this padline reads version %d: run 'padline plant init --db URL' as the plant's owner", v, SchemaVersion())
	}
	return nil
}

// OpenFlag opens the plant store named by a --db flag, else by
// $PADLINE_PLANT_URL; readOnly opens it with OpenReader.
func OpenFlag(ctx context.Context, flag string, readOnly bool) (*DB, error) {
	if flag == "" {
		flag = os.Getenv("PADLINE_PLANT_URL")
	}
	if !IsURL(flag) {
		return nil, fmt.Errorf("give the plant store with --db postgres://… or $PADLINE_PLANT_URL (got %q)", flag)
	}
	if readOnly {
		return OpenReader(ctx, flag)
	}
	return Open(ctx, flag)
}
