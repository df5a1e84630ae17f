package session

import (
	"errors"
	"regexp"
	"strings"
	"testing"
)

// qm205Serial loads the QM-205 demo variant's compiled serial pattern
// (`^QM205-[0-9]{6}$` in testdata/variants/QM-205.yaml).
func qm205Serial(t testing.TB) *regexp.Regexp {
	t.Helper()
	v, err := LoadVariant(repo + "/testdata/variants/QM-205.yaml")
	if err != nil {
		t.Fatal(err)
	}
	return v.Serial
}

func TestCleanSerial(t *testing.T) {
	qm205 := qm205Serial(t)
	long := strings.Repeat("7", 10*1024) // a 10 kB "serial": a paste or a runaway scanner
	tests := []struct {
		name    string
		pattern *regexp.Regexp
		raw     string
		want    string // the cleaned serial, when accepted
		wantErr string // the exact error line, when rejected
	}{
		{name: "plain", pattern: qm205, raw: "QM205-000123", want: "QM205-000123"},
		// Scanners end a read with CR, CR LF or LF depending on their setup.
		{name: "scanner CR", pattern: qm205, raw: "QM205-000123\r", want: "QM205-000123"},
		{name: "scanner CR LF", pattern: qm205, raw: "QM205-000123\r\n", want: "QM205-000123"},
		{name: "spaces and tab around", pattern: qm205, raw: " \tQM205-000123  ", want: "QM205-000123"},
		{name: "no pattern, inner space", pattern: nil, raw: "LOT 7 / 0042", want: "LOT 7 / 0042"},
		{name: "64 bytes", pattern: nil, raw: strings.Repeat("A", 64), want: strings.Repeat("A", 64)},
		{name: "empty", pattern: qm205, raw: "", wantErr: "bad serial: empty"},
		{name: "only CR LF", pattern: qm205, raw: "\r\n", wantErr: "bad serial: empty"},
		{name: "65 bytes", pattern: nil, raw: strings.Repeat("A", 65),
			wantErr: `bad serial "AAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAA"… (65 bytes): longer than 64 bytes`},
		{name: "10 kB", pattern: qm205, raw: long,
			wantErr: `bad serial "7777777777777777777777777777777777777777"… (10240 bytes): longer than 64 bytes`},
		// Control characters per ASCII (RFC 20, 1969, §2: codes 0–31 and 127;
		// from memory).
		{name: "NUL inside", pattern: qm205, raw: "QM205\x00000123",
			wantErr: `bad serial "QM205\x00000123": control character U+0000 at offset 5`},
		{name: "escape sequence", pattern: qm205, raw: "\x1b[2JQM205-000123",
			wantErr: `bad serial "\x1b[2JQM205-000123": control character U+001B at offset 0`},
		{name: "CR inside", pattern: qm205, raw: "QM205-00\r0123\r",
			wantErr: `bad serial "QM205-00\r0123": control character U+000D at offset 8`},
		{name: "LF between two reads", pattern: qm205, raw: "QM205-000123\nQM205-000124",
			wantErr: `bad serial "QM205-000123\nQM205-000124": control character U+000A at offset 12`},
		{name: "DEL", pattern: qm205, raw: "QM205-0001\x7f23",
			wantErr: `bad serial "QM205-0001\x7f23": control character U+007F at offset 10`},
		{name: "fullwidth digit", pattern: qm205, raw: "QM205-00０123",
			wantErr: `bad serial "QM205-00０123": character U+FF10 at offset 8 is not printable ASCII`},
		{name: "invalid UTF-8", pattern: qm205, raw: "QM205-\xff00123",
			wantErr: `bad serial "QM205-\xff00123": byte 0xff at offset 6 is not ASCII`},
		{name: "other variant's serial", pattern: qm205, raw: "QM212-000123",
			wantErr: "bad serial \"QM212-000123\": does not match the variant's serial pattern `^QM205-[0-9]{6}$`"},
		{name: "too short", pattern: qm205, raw: "QM205-12345",
			wantErr: "bad serial \"QM205-12345\": does not match the variant's serial pattern `^QM205-[0-9]{6}$`"},
		{name: "pattern with a newline", pattern: regexp.MustCompile("^A\nB$"), raw: "AB",
			wantErr: `bad serial "AB": does not match the variant's serial pattern "^A\nB$"`},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, err := CleanSerial(tt.pattern, tt.raw)
			if tt.wantErr == "" {
				if err != nil || got != tt.want {
					t.Fatalf("CleanSerial(%q) = %q, %v; want %q, nil", tt.raw, got, err, tt.want)
				}
				if err := validSerial(tt.pattern, tt.raw); err != nil {
					t.Errorf("validSerial disagrees: %v", err)
				}
				return
			}
			if err == nil {
				t.Fatalf("CleanSerial(%q) = %q, accepted", tt.raw, got)
			}
			if err.Error() != tt.wantErr {
				t.Errorf("error\n got %s\nwant %s", err, tt.wantErr)
			}
			if !errors.Is(err, ErrBadSerial) {
				t.Errorf("%v does not wrap ErrBadSerial", err)
			}
			if strings.ContainsAny(err.Error(), "\r\n") {
				t.Errorf("error spans lines: %q", err)
			}
			if verr := validSerial(tt.pattern, tt.raw); verr == nil || verr.Error() != err.Error() {
				t.Errorf("validSerial = %v, CleanSerial = %v", verr, err)
			}
		})
	}
}

func TestQuoteSerialCutsAtRunes(t *testing.T) {
	// The cut falls after 40 characters, never inside a multi-byte one.
	s := strings.Repeat("é", 50)
	got := quoteSerial(s)
	want := `"` + strings.Repeat("é", 40) + `"…`
	if got != want {
		t.Errorf("quoteSerial = %s, want %s", got, want)
	}
}
