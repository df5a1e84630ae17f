package session_test

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"padline/sequences/session"
	"padline/store"
)

// page is the shift log's page size (SQLite's default, 4096 bytes).
const page = 4096

// btreePage finds a b-tree page at or after byte off (its first byte says
// it is one: SQLite file format §1.6, "B-tree Pages",
// https://www.sqlite.org/fileformat.html); an overflow or free page holds
// bytes that quick_check does not read.
func btreePage(b []byte, off int) int {
	p := (off / page) * page
	for ; p+page <= len(b); p += page {
		if k := b[p]; k == 0x02 || k == 0x05 || k == 0x0a || k == 0x0d {
			return p
		}
	}
	return -1
}

// corruptions are twelve ways a shift log is damaged outside padline
// (a tool, a copy cut short, a disk): each is applied in place to a log
// the last clean close left pristine, so a start that skipped its check
// for a pristine log would accept it.
var corruptions = []struct {
	name string
	do   func(b []byte) []byte
}{
	{"page filled with 0xA5", func(b []byte) []byte { fill(b, btreePage(b, len(b)/2)+8, page-8, 0xA5); return b }},
	{"page zeroed", func(b []byte) []byte { fill(b, btreePage(b, len(b)/2), page, 0); return b }},
	{"cut to half", func(b []byte) []byte { return b[:(len(b)/2/page)*page] }},
	{"cut inside a page", func(b []byte) []byte { return b[:len(b)-page-1000] }},
	{"cell count of a page", func(b []byte) []byte { p := btreePage(b, len(b)/3); b[p+3], b[p+4] = 0x7f, 0xff; return b }},
	{"last page random", func(b []byte) []byte { randomize(b, len(b)-page, page, 1); return b }},
	{"two pages swapped", func(b []byte) []byte {
		p := btreePage(b, len(b)/4)
		q := btreePage(b, 3*len(b)/4)
		tmp := append([]byte(nil), b[p:p+page]...)
		copy(b[p:p+page], b[q:q+page])
		copy(b[q:q+page], tmp)
		return b
	}},
	{"header magic", func(b []byte) []byte { copy(b, "SQLite format 2\x00"); return b }},
	{"page 2 zeroed", func(b []byte) []byte { fill(b, page, page, 0); return b }},
	{"64 random bytes scattered", func(b []byte) []byte {
		r := rand.New(rand.NewPCG(12, 13))
		for range 64 {
			p := btreePage(b, page+r.IntN(len(b)-page))
			if p < 0 {
				continue
			}
			b[p+8+r.IntN(page-8)] = byte(r.UintN(256))
		}
		return b
	}},
	{"16 KB zeroed mid-file", func(b []byte) []byte { fill(b, (len(b)/2/page)*page, 4*page, 0); return b }},
	{"cell pointers of a page random", func(b []byte) []byte {
		for p := btreePage(b, len(b)/3); p >= 0; p = btreePage(b, p+page) {
			hdr := 8 // leaf page header; interior pages have 12 bytes
			if k := b[p]; k == 0x02 || k == 0x05 {
				hdr = 12
			}
			if n := int(b[p+3])<<8 | int(b[p+4]); n > 0 {
				randomize(b, p+hdr, 2*n, 3)
				break
			}
		}
		return b
	}},
}

func fill(b []byte, off, n int, v byte) {
	for i := off; i < off+n && i < len(b); i++ {
		b[i] = v
	}
}

func randomize(b []byte, off, n int, seed uint64) {
	r := rand.New(rand.NewPCG(seed, seed))
	for i := off; i < off+n && i < len(b); i++ {
		b[i] = byte(r.UintN(256))
	}
}

// writeInPlace puts b into the file at path without replacing the file
// (same inode), as a tool writing into it would.
func writeInPlace(t *testing.T, path string, b []byte) {
	t.Helper()
	f, err := os.OpenFile(path, os.O_WRONLY, 0)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if _, err := f.WriteAt(b, 0); err != nil {
		t.Fatal(err)
	}
	if err := f.Truncate(int64(len(b))); err != nil {
		t.Fatal(err)
	}
}

// baseLog runs units through a checked demo station and closes it: a
// pristine log with pages to damage.
func baseLog(t *testing.T, units int) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "shift.db")
	s := checkedDemo(t, session.Options{ShiftLog: path})
	in := make(chan string, units)
	for i := range units {
		in <- fmt.Sprintf("QM205-%06d", i+1)
	}
	close(in)
	if err := s.Run(context.Background(), session.ChanScanner(in)); err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	return path
}

// pristineCopy copies the log into a new folder and opens and closes a
// station on it once (a foreground check: the copy is another file), so
// the copy is pristine.
func pristineCopy(t *testing.T, from string) string {
	t.Helper()
	to := filepath.Join(t.TempDir(), "shift.db")
	in, err := os.Open(from)
	if err != nil {
		t.Fatal(err)
	}
	defer in.Close()
	out, err := os.Create(to)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := io.Copy(out, in); err != nil {
		t.Fatal(err)
	}
	out.Close()
	s := openDemo(t, session.Options{ShiftLog: to})
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	db, err := store.Open(to)
	if err != nil {
		t.Fatal(err)
	}
	ok, _ := db.Pristine()
	db.Close()
	if !ok {
		t.Fatal("a log a station opened and closed is not pristine")
	}
	return to
}

// Each of twelve corrupted copies of a pristine log is refused at start
// (the start skips quick_check only for a file nothing else has written),
// and the intact copy starts.
func TestCorruptedCopiesRefusedAtStart(t *testing.T) {
	base := baseLog(t, 300)
	intact := pristineCopy(t, base)
	s, err := session.Open(context.Background(), session.Options{Variant: "QM-205", Station: "demo-sim", ShiftLog: intact})
	if err != nil {
		t.Fatalf("intact copy: %v", err)
	}
	if err := s.LogCheck(context.Background()); err != nil {
		t.Fatalf("intact copy, background check: %v", err)
	}
	s.Close()
	for _, c := range corruptions {
		t.Run(strings.ReplaceAll(c.name, " ", "_"), func(t *testing.T) {
			path := pristineCopy(t, base)
			b, err := os.ReadFile(path)
			if err != nil {
				t.Fatal(err)
			}
			if len(b) < 16*page {
				t.Fatalf("log too small to damage: %d bytes", len(b))
			}
			writeInPlace(t, path, c.do(b))
			s, err := session.Open(context.Background(), session.Options{Variant: "QM-205", Station: "demo-sim", ShiftLog: path})
			if err == nil {
				s.Close()
				t.Fatal("a damaged shift log opened")
			}
			if !errors.Is(err, store.ErrCorrupt) && !errors.Is(err, store.ErrNotShiftLog) && !strings.Contains(err.Error(), "malformed") {
				t.Errorf("refused, but not as damage: %v", err)
			}
		})
	}
}

// Damage the disk makes under a pristine log changes no time stamp: the
// start trusts the record and checks in the background, which finds it
// and halts the station before its next unit. (The test writes the damage
// and then the record that matches the damaged file, as bit rot leaves it.)
func TestBackgroundDamageHaltsStation(t *testing.T) {
	path := pristineCopy(t, baseLog(t, 300))
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	fill(b, btreePage(b, len(b)/2)+8, page-8, 0xA5)
	writeInPlace(t, path, b)
	vouchFor(t, path)
	s, err := session.Open(context.Background(), session.Options{Variant: "QM-205", Station: "demo-sim", ShiftLog: path})
	if err != nil {
		t.Fatalf("the start checked in the foreground after all: %v", err)
	}
	defer s.Close()
	if err := s.LogCheck(context.Background()); !errors.Is(err, store.ErrCorrupt) {
		t.Fatalf("background check: %v, want ErrCorrupt", err)
	}
	in := make(chan string, 1)
	in <- "QM205-000901"
	close(in)
	err = s.Run(context.Background(), session.ChanScanner(in))
	if !errors.Is(err, session.ErrHalted) || !errors.Is(err, store.ErrCorrupt) {
		t.Fatalf("run after the background check found damage: %v; want the station halted", err)
	}
}

// A pristine log that no check has found sound for longer than
// LogCheckMaxAge is checked in the foreground again.
func TestStaleCheckRecordChecksAtStart(t *testing.T) {
	path := pristineCopy(t, baseLog(t, 300))
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	fill(b, btreePage(b, len(b)/2)+8, page-8, 0xA5)
	writeInPlace(t, path, b)
	vouchFor(t, path, time.Now().Add(-session.LogCheckMaxAge-time.Hour))
	if s, err := session.Open(context.Background(), session.Options{Variant: "QM-205", Station: "demo-sim", ShiftLog: path}); err == nil {
		s.Close()
		t.Fatal("a log last found sound more than LogCheckMaxAge ago started without a check")
	} else if !errors.Is(err, store.ErrCorrupt) {
		t.Fatalf("refused, but not as damage: %v", err)
	}
}

// vouchFor rewrites path's check record for the file as it is now (and,
// when given, the time a check last found it sound).
func vouchFor(t *testing.T, path string, sound ...time.Time) {
	t.Helper()
	rec := path + store.CheckRecordSuffix
	b, err := os.ReadFile(rec)
	if err != nil {
		t.Fatal(err)
	}
	var r map[string]any
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatal(err)
	}
	var st syscall.Stat_t
	if err := syscall.Stat(path, &st); err != nil {
		t.Fatal(err)
	}
	r["file"] = map[string]any{"dev": st.Dev, "ino": st.Ino, "size": st.Size,
		"mtime_ns": st.Mtim.Nano(), "ctime_ns": st.Ctim.Nano()}
	if len(sound) > 0 {
		r["checked"] = sound[0].UTC()
	}
	if b, err = json.Marshal(r); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(rec, b, 0o644); err != nil {
		t.Fatal(err)
	}
}

// The on-demand check ('padline station status --check-log') reads the
// whole file and reports damage a start on a pristine log would leave to
// the background.
func TestCheckLogOnDemand(t *testing.T) {
	path := pristineCopy(t, baseLog(t, 300))
	c, err := session.CheckLog(context.Background(), path)
	if err != nil || !c.OK || !c.Pristine || c.Sound.IsZero() || c.Err() != nil {
		t.Fatalf("sound log: %+v, %v", c, err)
	}
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	fill(b, btreePage(b, len(b)/2)+8, page-8, 0xA5)
	writeInPlace(t, path, b)
	c, err = session.CheckLog(context.Background(), path)
	if err != nil || c.OK || c.Pristine || !errors.Is(c.Err(), store.ErrCorrupt) {
		t.Fatalf("damaged log: %+v, %v", c, err)
	}
	if c, err := session.CheckLog(context.Background(), path+".none"); c != nil || err != nil {
		t.Errorf("no log: %+v, %v", c, err)
	}
}
