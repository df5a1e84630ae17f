package session

import (
	"bufio"
	"context"
	"errors"
	"io"
	"sync"
)

var _ Scanner = ScannerFunc(nil)

// OneSerial yields serial once, then ends ('padline run --serial').
func OneSerial(serial string) Scanner {
	done := false
	return ScannerFunc(func(context.Context) (string, bool, error) {
		if done {
			return "", false, nil
		}
		done = true
		return serial, true, nil
	})
}

// ChanScanner yields the serials sent on ch (a browser screen's scans) and
// ends when ch is closed or the session's context ends.
func ChanScanner(ch <-chan string) Scanner {
	return ScannerFunc(func(ctx context.Context) (string, bool, error) {
		select {
		case s, ok := <-ch:
			return s, ok, nil
		case <-ctx.Done():
			return "", false, nil
		}
	})
}

// maxLine is the longest line LineScanner reads; a longer one is refused
// (ErrLineTooLong) and the scanner goes on with the next line.
const maxLine = 1 << 20

// ErrLineTooLong is returned by LineScanner's Scan for a line over 1 MiB,
// with ok true and the line's first bytes as raw: the session refuses that
// scan and reads on.
var ErrLineTooLong = errors.New("line over 1 MiB: not a serial")

// lineReader splits r into lines ended by LF, CR or CR LF (barcode scanners
// are set to send any of them), without waiting for the byte after a CR.
type lineReader struct {
	r      *bufio.Reader
	skipLF bool // the last line ended in CR: a LF right after it is part of that end
}

// next returns the next line; long is true when it was over maxLine (only
// its first bytes are kept, the rest is read and dropped).
func (l *lineReader) next() (text string, long bool, err error) {
	var buf []byte
	n := 0
	for {
		b, err := l.r.ReadByte()
		if err != nil {
			if n > 0 && errors.Is(err, io.EOF) {
				return string(buf), n > maxLine, nil
			}
			return "", false, err
		}
		skip := l.skipLF
		l.skipLF = false
		switch {
		case b == '\n' && skip && n == 0:
			continue
		case b == '\n':
			return string(buf), n > maxLine, nil
		case b == '\r':
			l.skipLF = true
			return string(buf), n > maxLine, nil
		}
		n++
		if n <= maxLine {
			buf = append(buf, b)
		} else if len(buf) > 64 {
			buf = buf[:64]
		}
	}
}

// LineScanner yields the lines of r as a barcode scanner types them, ended
// by LF, CR or CR LF. A read error ends it with that error; a line over
// 1 MiB is yielded as ErrLineTooLong (the session refuses it and goes on).
// The session's context ending ends it at once, even while a read is
// blocked waiting for a scan (the blocked read itself is left to the
// reader's owner).
func LineScanner(r io.Reader) Scanner {
	type line struct {
		text string
		err  error
	}
	lines := make(chan line)
	var start sync.Once
	read := func(ctx context.Context) {
		defer close(lines)
		lr := &lineReader{r: bufio.NewReaderSize(r, 64*1024)}
		for {
			text, long, err := lr.next()
			if errors.Is(err, io.EOF) {
				return
			}
			l := line{text: text, err: err}
			if long {
				l.err = ErrLineTooLong
			}
			select {
			case lines <- l:
			case <-ctx.Done():
				return
			}
			if err != nil {
				return
			}
		}
	}
	return ScannerFunc(func(ctx context.Context) (string, bool, error) {
		start.Do(func() { go read(ctx) })
		select {
		case l, ok := <-lines:
			if !ok {
				return "", false, nil
			}
			if errors.Is(l.err, ErrLineTooLong) {
				return l.text, true, l.err
			}
			if l.err != nil {
				return "", false, l.err
			}
			return l.text, true, nil
		case <-ctx.Done():
			return "", false, nil
		}
	})
}
