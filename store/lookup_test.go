package store_test

import (
	"testing"
	"time"

	"padline/store"
)

func TestParseWhen(t *testing.T) {
	now := time.Date(2026, 11, 30, 14, 0, 0, 0, time.UTC)
	tests := []struct {
		in   string
		want time.Time
	}{
		{"", time.Time{}},
		{"8h", now.Add(-8 * time.Hour)},
		{"90m", now.Add(-90 * time.Minute)},
		{"2d", now.Add(-48 * time.Hour)},
		{"2026-11-30", time.Date(2026, 11, 30, 0, 0, 0, 0, time.Local)},
		{"2026-11-30 06:30", time.Date(2026, 11, 30, 6, 30, 0, 0, time.Local)},
		{"2026-11-30T06:30:00Z", time.Date(2026, 11, 30, 6, 30, 0, 0, time.UTC)},
	}
	for _, tt := range tests {
		got, err := store.ParseWhen(tt.in, now)
		if err != nil || !got.Equal(tt.want) {
			t.Errorf("ParseWhen(%q) = %v, %v; want %v", tt.in, got, err, tt.want)
		}
	}
	for _, bad := range []string{"-8h", "tomorrow", "2026-13-01"} {
		if _, err := store.ParseWhen(bad, now); err == nil {
			t.Errorf("ParseWhen(%q) accepted", bad)
		}
	}
}
