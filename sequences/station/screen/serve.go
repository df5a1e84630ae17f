package screen

import (
	"context"
	"errors"
	"fmt"
	"net"
	"net/http"
	"time"

	"padline/sequences/session"
)

// Served is a station screen listening for a running session.
type Served struct {
	// Addr is the address the screen listens on.
	Addr net.Addr
	// Loopback is true when only this computer can reach it.
	Loopback bool
	// Err receives the server's error should it stop by itself.
	Err <-chan error

	srv     *Server
	hs      *http.Server
	scanner session.Scanner
}

// Serve serves the station screen for sess at addr (host:port; a host that
// is not a loopback address makes the screen reachable from the network)
// and connects it to the session through a Desk. Give the session's Run
// the Scanner; Close the screen when Run returns.
func Serve(ctx context.Context, sess *session.Session, stdin session.Scanner, addr string) (*Served, error) {
	srv, err := NewServer()
	if err != nil {
		return nil, err
	}
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return nil, fmt.Errorf("station screen: %w", err)
	}
	host, _, _ := net.SplitHostPort(addr)
	errc := make(chan error, 1)
	s := &Served{Addr: ln.Addr(), Loopback: IsLoopback(host), Err: errc, srv: srv,
		hs: &http.Server{Handler: srv, ReadHeaderTimeout: 5 * time.Second}}
	go func() {
		if err := s.hs.Serve(ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
			errc <- fmt.Errorf("station screen: %w", err)
		}
	}()
	desk := NewDesk(srv, sess)
	desk.Start(ctx)
	s.scanner = desk.Scanner(stdin)
	return s, nil
}

// Scanner is the scans of the page and of stdin, for the session's Run.
func (s *Served) Scanner() session.Scanner { return s.scanner }

// Close ends the pages' event streams and stops the server.
func (s *Served) Close() {
	s.srv.Close() // so Shutdown need not wait for the streams
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
	defer cancel()
	_ = s.hs.Shutdown(ctx)
}

// IsLoopback reports whether host names this computer only.
func IsLoopback(host string) bool {
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}
