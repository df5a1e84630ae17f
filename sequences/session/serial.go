package session

import (
	"errors"
	"fmt"
	"regexp"
	"strconv"
	"strings"
	"unicode/utf8"
)

// maxSerialBytes is the longest serial accepted. Serials are printed on a
// label and read by a scanner; anything longer is a misread or a paste.
const maxSerialBytes = 64

// ErrBadSerial is wrapped by every serial rejection, so a caller can tell a
// bad scan (ask for a rescan) from a station problem.
var ErrBadSerial = errors.New("bad serial")

// CleanSerial checks one serial as it came from a scanner or a flag and
// returns it ready to record. Leading and trailing spaces, tabs, CR and LF
// are trimmed first (scanners end a read with CR or CR LF). What is left must
// be 1 to 64 bytes of printable ASCII (a barcode scanner sends nothing else)
// and match pattern; a nil pattern accepts any such serial. Errors wrap
// ErrBadSerial, are one line and quote the serial with %q, cut to 40
// characters when longer.
func CleanSerial(pattern *regexp.Regexp, raw string) (string, error) {
	s := strings.Trim(raw, " \t\r\n")
	if s == "" {
		return "", fmt.Errorf("%w: empty", ErrBadSerial)
	}
	if len(s) > maxSerialBytes {
		return "", fmt.Errorf("%w %s (%d bytes): longer than %d bytes", ErrBadSerial, quoteSerial(s), len(s), maxSerialBytes)
	}
	for i := 0; i < len(s); {
		r, size := utf8.DecodeRuneInString(s[i:])
		switch {
		case r == utf8.RuneError && size <= 1:
			return "", fmt.Errorf("%w %s: byte %#02x at offset %d is not ASCII", ErrBadSerial, quoteSerial(s), s[i], i)
		case r < 0x20 || r == 0x7f:
			return "", fmt.Errorf("%w %s: control character %U at offset %d", ErrBadSerial, quoteSerial(s), r, i)
		case r > 0x7f:
			return "", fmt.Errorf("%w %s: character %U at offset %d is not printable ASCII", ErrBadSerial, quoteSerial(s), r, i)
		}
		i += size
	}
	if pattern != nil && !pattern.MatchString(s) {
		return "", fmt.Errorf("%w %s: does not match the variant's serial pattern %s", ErrBadSerial, quoteSerial(s), quotePattern(pattern.String()))
	}
	return s, nil
}

// validSerial reports whether s is an acceptable serial for pattern; see
// CleanSerial, which also returns the trimmed serial to record.
func validSerial(pattern *regexp.Regexp, s string) error {
	_, err := CleanSerial(pattern, s)
	return err
}

// quoteSerial quotes s for an error line: Go-quoted (so control characters
// and invalid bytes cannot reach the terminal or the log raw) and cut after
// 40 characters with a trailing "…".
func quoteSerial(s string) string {
	const keep = 40
	n := 0
	for i := range s {
		if n == keep {
			return strconv.Quote(s[:i]) + "…"
		}
		n++
	}
	return strconv.Quote(s)
}

// quotePattern shows a regular expression on one line: in backquotes when
// it can be, else Go-quoted.
func quotePattern(p string) string {
	if strconv.CanBackquote(p) {
		return "`" + p + "`"
	}
	return strconv.Quote(p)
}

// maxNameBytes is the longest operator, lot, station, fixture or variant
// name accepted: a name is read on a badge or a screen, never a paragraph.
const maxNameBytes = 64

// ErrBadName is wrapped by every name rejection of CleanName.
var ErrBadName = errors.New("bad name")

// CleanName checks an operator, lot, station, fixture or variant name the
// way CleanSerial checks a serial: spaces around it are trimmed; what is
// left must be at most 64 bytes of valid UTF-8 without control characters
// (ESC, CR, LF, DEL, C1), which would move the cursor or forge lines on the
// station's terminal, in the history table and in CSV. Empty is allowed
// (the caller decides whether the name is required). what names the field
// for the error, which quotes the value with %q.
func CleanName(what, raw string) (string, error) {
	s := strings.TrimSpace(raw)
	if len(s) > maxNameBytes {
		return "", fmt.Errorf("%w: %s %s (%d bytes): longer than %d bytes", ErrBadName, what, quoteSerial(s), len(s), maxNameBytes)
	}
	if off, r, bad := badText(s); bad {
		return "", fmt.Errorf("%w: %s %s: control or invalid character %U at offset %d", ErrBadName, what, quoteSerial(s), r, off)
	}
	return s, nil
}

// badText finds the first rune of s that may not appear in a one-line
// text: an invalid UTF-8 byte, a C0 control (tab included), DEL or a C1
// control (Unicode, "C0 and C1 control codes").
func badText(s string) (offset int, r rune, bad bool) {
	for i := 0; i < len(s); {
		r, size := utf8.DecodeRuneInString(s[i:])
		if (r == utf8.RuneError && size <= 1) || r < 0x20 || (r >= 0x7f && r <= 0x9f) {
			return i, r, true
		}
		i += size
	}
	return 0, 0, false
}
