package lineboard

import (
	"context"
	"embed"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"net"
	"net/http"
	"time"

	"padline/store/driftreport"
	"padline/store/plant"
)

//go:embed assets
var assets embed.FS

// Source is what the board reads: plant.DB's Board.
type Source interface {
	Board(ctx context.Context, line string, shiftStart, now time.Time) ([]plant.BoardStation, error)
}

var _ Source = (*plant.DB)(nil)

// Board is the line board's state as sent to the page.
type Board struct {
	Line       string               `json:"line"`
	Now        time.Time            `json:"now"`
	ShiftName  string               `json:"shift"`
	ShiftStart time.Time            `json:"shift_start"`
	Stations   []plant.BoardStation `json:"stations"`
	Error      string               `json:"error,omitempty"`
}

// Server is the line board's http.Handler.
type Server struct {
	Src  Source
	Line string // "" for the whole plant
	// Shift names the shift t falls in and gives its start.
	Shift func(t time.Time) (name string, start time.Time)
	// Every is the refresh period of the event stream (default 2 s).
	Every time.Duration
	// Now is the clock (default time.Now).
	Now func() time.Time

	mux *http.ServeMux
}

func (s *Server) now() time.Time {
	if s.Now != nil {
		return s.Now()
	}
	return time.Now()
}

// Snapshot reads the board once.
func (s *Server) Snapshot(ctx context.Context) Board {
	now := s.now()
	name, start := s.Shift(now)
	b := Board{Line: s.Line, Now: now, ShiftName: name, ShiftStart: start}
	st, err := s.Src.Board(ctx, s.Line, start, now)
	if err != nil {
		b.Error = err.Error()
	}
	if st == nil {
		st = []plant.BoardStation{}
	}
	b.Stations = st
	return b
}

// ServeHTTP serves / (the page), /board.json and /events (server-sent
// events: one board every Every).
func (s *Server) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	if s.mux == nil {
		s.mux = http.NewServeMux()
		sub, _ := fs.Sub(assets, "assets")
		s.mux.Handle("GET /", http.FileServerFS(sub))
		s.mux.HandleFunc("GET /board.json", s.serveJSON)
		s.mux.HandleFunc("GET /events", s.serveEvents)
	}
	w.Header().Set("X-Content-Type-Options", "nosniff")
	s.mux.ServeHTTP(w, r)
}

func (s *Server) serveJSON(w http.ResponseWriter, r *http.Request) {
	w.Header().Set("Content-Type", "application/json")
	w.Header().Set("Cache-Control", "no-store")
	_ = json.NewEncoder(w).Encode(s.Snapshot(r.Context()))
}

func (s *Server) serveEvents(w http.ResponseWriter, r *http.Request) {
	fl, ok := w.(http.Flusher)
	if !ok {
		http.Error(w, "streaming unsupported", http.StatusInternalServerError)
		return
	}
	w.Header().Set("Content-Type", "text/event-stream")
	w.Header().Set("Cache-Control", "no-store")
	every := s.Every
	if every <= 0 {
		every = 2 * time.Second
	}
	t := time.NewTicker(every)
	defer t.Stop()
	for {
		b, _ := json.Marshal(s.Snapshot(r.Context()))
		if _, err := fmt.Fprintf(w, "retry: 2000\ndata: %s\n\n", b); err != nil {
			return
		}
		fl.Flush()
		select {
		case <-r.Context().Done():
			return
		case <-t.C:
		}
	}
}

// LocalShift is the board's default shift: the shift of drift --by shift
// (early 06–14, late 14–22, night 22–06) in local time.
func LocalShift(t time.Time) (string, time.Time) {
	name, start, _ := driftreport.ShiftOf(t.Local())
	return name, start
}

// Serve serves the board of line ("": the whole plant) from src on ln
// until ctx ends.
func Serve(ctx context.Context, ln net.Listener, src Source, line string) error {
	srv := &http.Server{Handler: &Server{Src: src, Line: line, Shift: LocalShift}, ReadHeaderTimeout: 10 * time.Second}
	go func() {
		<-ctx.Done()
		sctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
		defer cancel()
		_ = srv.Shutdown(sctx)
	}()
	if err := srv.Serve(ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
		return err
	}
	return nil
}
