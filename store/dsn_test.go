package store_test

import (
	"context"
	"os"
	"path/filepath"
	"testing"

	"padline/store"
)

// A path with '?', '#' or '%' must name the file that is checked and the
// file that is opened: one file, the one given.
func TestOpenOddPathNamesOneFile(t *testing.T) {
	for _, name := range []string{"q?x.db", "a#b.db", "p%3Fq.db"} {
		t.Run(name, func(t *testing.T) {
			dir := t.TempDir()
			path := filepath.Join(dir, name)
			db, err := store.Open(path)
			if err != nil {
				t.Fatal(err)
			}
			if _, err := db.PutVariant(context.Background(), "QM-205", []byte("name: QM-205\n")); err != nil {
				t.Fatal(err)
			}
			if err := db.Close(); err != nil {
				t.Fatal(err)
			}
			raw, err := os.ReadFile(path)
			if err != nil || len(raw) < 16 || string(raw[:15]) != "SQLite format 3" {
				t.Fatalf("%s is not the shift log (%v)", path, err)
			}
			ents, _ := os.ReadDir(dir)
			for _, e := range ents {
				if n := e.Name(); n != name && n != name+"-wal" && n != name+"-shm" && n != name+store.CheckRecordSuffix {
					t.Errorf("opening %q also made %q", name, n)
				}
			}
		})
	}
}
