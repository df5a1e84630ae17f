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
