package store_test

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"testing"
	"time"

	"padline/store"
)

func pristine(t *testing.T, path string) bool {
	t.Helper()
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	ok, _ := db.Pristine()
	if err := db.Close(); err != nil {
		t.Fatal(err)
	}
	return ok
}

// A log that only padline wrote since a check found it sound is known
// pristine at the next open (no quick_check needed at start); readers do
// not break the chain; any other write does, even one that puts the same
// bytes back and the modification time with them.
func TestCheckRecordChain(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "shift.db")
	seedLog(t, path) // created by Open: sound
	if !pristine(t, path) {
		t.Fatal("a log padline created and closed is not pristine")
	}
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	hash := putDemo(t, db)
	if _, err := db.Record(ctx, demoRun(roRuns+1, hash)); err != nil {
		t.Fatal(err)
	}
	db.Close()
	if !pristine(t, path) {
		t.Fatal("a run written through a pristine log broke the chain")
	}
	if n, err := countRuns(path); err != nil || n != roRuns+1 {
		t.Fatalf("read-only: %d runs, %v", n, err)
	}
	if !pristine(t, path) {
		t.Fatal("a read-only reader broke the chain")
	}

	// Another writer: the same bytes written back, modification time
	// restored.
	fi, _ := os.Stat(path)
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	time.Sleep(10 * time.Millisecond)
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.Chtimes(path, fi.ModTime(), fi.ModTime()); err != nil {
		t.Fatal(err)
	}
	if pristine(t, path) {
		t.Fatal("a log written by another program counts as pristine")
	}
	// Not pristine and not checked: the close writes no record.
	if pristine(t, path) {
		t.Fatal("an unchecked open made the log pristine")
	}
	db, err = store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := db.QuickCheck(ctx); err != nil {
		t.Fatal(err)
	}
	db.Close()
	if !pristine(t, path) {
		t.Fatal("a checked log is not pristine after its close")
	}
	// A copy is another file.
	cp := path + ".copy"
	if err := copyFile(path, cp, 0o644); err != nil {
		t.Fatal(err)
	}
	if err := copyFile(path+store.CheckRecordSuffix, cp+store.CheckRecordSuffix, 0o644); err != nil {
		t.Fatal(err)
	}
	if pristine(t, cp) {
		t.Fatal("a copy with the record copied beside it counts as pristine")
	}
}

// The background check finds damage the disk made under an open, pristine
// log; the record goes, so the next start checks in the foreground.
func TestBackgroundCheckFindsDamage(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "shift.db")
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	hash := putDemo(t, db)
	for i := range 400 {
		if _, err := db.Record(ctx, demoRun(i, hash)); err != nil {
			t.Fatal(err)
		}
	}
	db.Close()
	db, err = store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	if ok, _ := db.Pristine(); !ok {
		t.Fatal("not pristine")
	}
	damagePage(t, path)
	db.CheckInBackground()
	if err := db.WaitCheck(ctx); !errors.Is(err, store.ErrCorrupt) {
		t.Fatalf("background check: %v, want ErrCorrupt", err)
	}
	if !errors.Is(db.Damage(), store.ErrCorrupt) {
		t.Fatal("Damage() does not report it")
	}
	db.Close()
	if _, err := os.Stat(path + store.CheckRecordSuffix); err == nil {
		t.Fatal("the check record outlived the damage")
	}
}

// damagePage overwrites a b-tree page near the middle of the file in
// place (its first byte says it is one: SQLite file format §1.6, "B-tree
// Pages", https://www.sqlite.org/fileformat.html).
func damagePage(t *testing.T, path string) {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	const page = 4096
	mid := (len(b) / page / 2) * page
	for ; mid+page <= len(b); mid += page {
		if k := b[mid]; k == 0x02 || k == 0x05 || k == 0x0a || k == 0x0d {
			break
		}
	}
	f, err := os.OpenFile(path, os.O_WRONLY, 0)
	if err != nil {
		t.Fatal(err)
	}
	junk := make([]byte, page-8)
	for i := range junk {
		junk[i] = 0xA5
	}
	if _, err := f.WriteAt(junk, int64(mid+8)); err != nil {
		t.Fatal(err)
	}
	f.Close()
}
