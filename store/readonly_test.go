package store_test

import (
	"context"
	"errors"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"

	"padline/store"
)

// roRuns is the number of runs the read-only tests write before reading.
const roRuns = 40

// seedLog writes roRuns runs into a new log at path and closes it.
func seedLog(t *testing.T, path string) {
	t.Helper()
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	hash := putDemo(t, db)
	for i := range roRuns {
		if _, err := db.Record(context.Background(), demoRun(i, hash)); err != nil {
			t.Fatal(err)
		}
	}
	if err := db.Close(); err != nil {
		t.Fatal(err)
	}
}

// countRuns opens path read-only and counts its runs.
func countRuns(path string) (int, error) {
	db, err := store.OpenReadOnly(path)
	if err != nil {
		return 0, err
	}
	defer db.Close()
	ids := map[int64]bool{}
	for e, err := range db.Runs(context.Background(), store.Filter{}) {
		if err != nil {
			return 0, err
		}
		ids[e.ID] = true
	}
	return len(ids), nil
}

// sideFiles lists path's -wal and -shm files that exist.
func sideFiles(path string) []string {
	var out []string
	for _, s := range []string{"-wal", "-shm"} {
		if _, err := os.Stat(path + s); err == nil {
			out = append(out, filepath.Base(path+s))
		}
	}
	return out
}

// A read-only open in a writable folder reads every run, refuses to
// write, leaves no -wal or -shm file and does not change the file.
func TestOpenReadOnly(t *testing.T) {
	path := filepath.Join(t.TempDir(), "shift.db")
	seedLog(t, path)
	before, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	db, err := store.OpenReadOnly(path)
	if err != nil {
		t.Fatal(err)
	}
	if !db.ReadOnly() {
		t.Error("ReadOnly() false")
	}
	if _, err := db.Record(context.Background(), demoRun(roRuns+1, "x")); err == nil {
		t.Error("a read-only log took a run")
	}
	db.Close()
	if n, err := countRuns(path); err != nil || n != roRuns {
		t.Fatalf("read-only: %d runs, %v; want %d", n, err, roRuns)
	}
	if s := sideFiles(path); len(s) > 0 {
		t.Errorf("read-only open left %v behind", s)
	}
	after, _ := os.ReadFile(path)
	if string(before) != string(after) {
		t.Error("read-only open changed the file")
	}
	// A path with nothing at it is not created.
	if _, err := store.OpenReadOnly(path + ".none"); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("OpenReadOnly(missing): %v, want not-exist", err)
	}
	if _, err := os.Stat(path + ".none"); err == nil {
		t.Error("OpenReadOnly created a log")
	}
}

// readOnlyEnv names the folder TestReadOnlyWithoutWriteAccess prepared
// when the test binary runs itself as an unprivileged user.
const readOnlyEnv = "PADLINE_TEST_RO_DIR"

// A log whose file is chmod 444, or whose folder is read-only, is read by
// a process that may not write it; creating a log in a folder it may not
// write says the folder is not writable. Root may write anything, so as
// root the test runs its checks in a copy of this test binary as the
// unprivileged user nobody (uid 65534).
func TestReadOnlyWithoutWriteAccess(t *testing.T) {
	if dir := os.Getenv(readOnlyEnv); dir != "" {
		readOnlyChecks(t, dir)
		return
	}
	base := t.TempDir()
	// t.TempDir's folders are 0700: let the other user reach the files.
	for _, d := range []string{filepath.Dir(base), base} {
		if err := os.Chmod(d, 0o755); err != nil {
			t.Fatal(err)
		}
	}
	for _, sub := range []string{"rofolder", "rofile", "locked"} {
		if err := os.Mkdir(filepath.Join(base, sub), 0o755); err != nil {
			t.Fatal(err)
		}
	}
	seedLog(t, filepath.Join(base, "rofolder", "shift.db"))
	seedLog(t, filepath.Join(base, "rofile", "shift.db"))
	for p, m := range map[string]os.FileMode{
		"rofolder/shift.db": 0o444, "rofolder": 0o555,
		"rofile/shift.db": 0o444, "rofile": 0o777,
		"locked": 0o555,
	} {
		if err := os.Chmod(filepath.Join(base, p), m); err != nil {
			t.Fatal(err)
		}
	}
	t.Cleanup(func() {
		for _, d := range []string{"rofolder", "rofile", "locked"} {
			os.Chmod(filepath.Join(base, d), 0o755)
		}
	})
	if os.Geteuid() != 0 {
		readOnlyChecks(t, base)
		return
	}
	self, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	bin := filepath.Join(base, "store.test")
	if err := copyFile(self, bin, 0o755); err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(bin, "-test.run=^TestReadOnlyWithoutWriteAccess$", "-test.v")
	cmd.Dir = base
	cmd.Env = append(os.Environ(), readOnlyEnv+"="+base)
	cmd.SysProcAttr = &syscall.SysProcAttr{Credential: &syscall.Credential{Uid: 65534, Gid: 65534}}
	out, err := cmd.CombinedOutput()
	t.Logf("as uid 65534:\n%s", out)
	if err != nil {
		t.Fatalf("checks as uid 65534: %v", err)
	}
	if !strings.Contains(string(out), "--- PASS: TestReadOnlyWithoutWriteAccess") {
		t.Fatal("the checks did not run as uid 65534")
	}
}

func readOnlyChecks(t *testing.T, base string) {
	rofolder := filepath.Join(base, "rofolder", "shift.db")
	if n, err := countRuns(rofolder); err != nil || n != roRuns {
		t.Errorf("file 444 in a read-only folder: %d runs, %v; want %d", n, err, roRuns)
	}
	if s := sideFiles(rofolder); len(s) > 0 {
		t.Errorf("read-only folder: %v created", s)
	}
	rofile := filepath.Join(base, "rofile", "shift.db")
	if n, err := countRuns(rofile); err != nil || n != roRuns {
		t.Errorf("file 444 in a writable folder: %d runs, %v; want %d", n, err, roRuns)
	}
	// Writing: a new log in a folder this user cannot write, and an
	// existing log whose folder is read-only.
	for _, p := range []string{filepath.Join(base, "locked", "new.db"), rofolder} {
		_, err := store.Open(p)
		if !errors.Is(err, store.ErrFolderNotWritable) || !strings.Contains(err.Error(), "is not writable") ||
			strings.Contains(err.Error(), "no such file") {
			t.Errorf("Open(%s): %v; want the folder named as not writable", p, err)
		}
	}
	if _, err := os.Stat(filepath.Join(base, "locked", "new.db")); err == nil {
		t.Error("a log appeared in the locked folder")
	}
	// A folder that does not exist is named as such.
	missing := filepath.Join(base, "nofolder", "new.db")
	if _, err := store.Open(missing); err == nil || !strings.Contains(err.Error(), "does not exist") {
		t.Errorf("Open(%s): %v; want the folder named as missing", missing, err)
	}
}

func copyFile(from, to string, mode os.FileMode) error {
	in, err := os.Open(from)
	if err != nil {
		return err
	}
	defer in.Close()
	out, err := os.OpenFile(to, os.O_CREATE|os.O_WRONLY|os.O_TRUNC, mode)
	if err != nil {
		return err
	}
	if _, err := io.Copy(out, in); err != nil {
		out.Close()
		return err
	}
	return out.Close()
}
