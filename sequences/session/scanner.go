package session

import (
	"bufio"
	"context"
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

// maxLine is the longest line LineScanner reads; a longer one is an error.
const maxLine = 1 << 20

// LineScanner yields the lines of r as a barcode scanner types them. A read
// error (or a line over 1 MiB) ends it with that error. The session's
// context ending ends it at once, even while a read is blocked waiting for
// a scan (the blocked read itself is left to the reader's owner).
func LineScanner(r io.Reader) Scanner {
	type line struct {
		text string
		err  error
	}
	lines := make(chan line)
	var start sync.Once
	read := func(ctx context.Context) {
		defer close(lines)
		sc := bufio.NewScanner(r)
		sc.Buffer(make([]byte, 64*1024), maxLine)
		for sc.Scan() {
			select {
			case lines <- line{text: sc.Text()}:
			case <-ctx.Done():
				return
			}
		}
		if err := sc.Err(); err != nil {
			select {
			case lines <- line{err: err}:
			case <-ctx.Done():
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
			if l.err != nil {
				return "", false, l.err
			}
			return l.text, true, nil
		case <-ctx.Done():
			return "", false, nil
		}
	})
}
