package session

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestFilesPage: docs/files.md is FilesMarkdown, so the page in the
// repository says what the parser reads (run with -update to rewrite it).
func TestFilesPage(t *testing.T) {
	page := filepath.Join(repo, "docs", "files.md")
	want := FilesMarkdown()
	if *update {
		if err := os.MkdirAll(filepath.Dir(page), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(page, []byte(want), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	got, err := os.ReadFile(page)
	if err != nil {
		t.Fatal(err)
	}
	if string(got) != want {
		t.Errorf("docs/files.md differs from the key table: go test ./sequences/session -run TestFilesPage -update")
	}
}

// TestFileHelp: every key of a file kind, and nothing of the other, is in
// its help, with the plausible range of each number.
func TestFileHelp(t *testing.T) {
	for _, kind := range []string{"variant", "station"} {
		h := FileHelp(kind)
		for _, k := range KeyTable() {
			_, ours := keyIndex(kind, k.Name)
			if has := strings.Contains(h, "\n  "+k.Name+"  ("); has != ours {
				t.Errorf("%s help: key %s of the %s file: shown %v", kind, k.Name, k.File, has)
			}
		}
		for _, must := range map[string][]string{
			"variant": {"dist: normal | uniform | triangular", "sd: σ", "plan: is optional", "allow_unusual", "plausible: 3…18 V (JEDEC JESD13-B"},
			"station": {"sim: section", "allow_unusual", "plausible: 0.001…0.5 pF"},
		}[kind] {
			if !strings.Contains(h, must) {
				t.Errorf("%s help lacks %q", kind, must)
			}
		}
	}
}
