package screen

import (
	"crypto/rand"
	"crypto/subtle"
	"embed"
	"encoding/hex"
	"encoding/json"
	"html/template"
	"io"
	"io/fs"
	"net"
	"net/http"
	"net/url"
	"os"
	"strings"
	"sync"
	"time"
)

//go:embed assets
var assets embed.FS

// InputKind is what the technician did on the page.
type InputKind string

// The technician's inputs.
const (
	InputScan       InputKind = "scan"        // a scan typed into the page: serial or badge
	InputStartCheck InputKind = "start-check" // run the shift-start check now
	InputAckRepeat  InputKind = "ack-repeat"  // test the repeat-scanned serial again
)

// Input is one thing the technician did on the page.
type Input struct {
	Kind InputKind
	// Text is the scan for InputScan, the serial for InputAckRepeat.
	Text string
}

// Server serves the station screen and holds its State. Apply feeds it
// events; Inputs delivers what the technician does on the page. It is safe
// for concurrent use.
type Server struct {
	token  string
	inputs chan Input
	page   *template.Template
	static http.Handler
	// hostname is this computer's name, lower case ("" if unknown).
	hostname string
	// heartbeat is how often an idle event stream gets a comment line, so
	// a dead connection is noticed.
	heartbeat time.Duration

	closeOnce sync.Once
	closed    chan struct{}

	mu    sync.Mutex
	state State
	body  []byte // state as JSON
	subs  map[chan []byte]struct{}
}

// NewServer returns a screen with an empty state and a fresh random token
// for this start of the program.
func NewServer() (*Server, error) {
	var b [16]byte
	if _, err := rand.Read(b[:]); err != nil {
		return nil, err
	}
	page, err := template.ParseFS(assets, "assets/index.html")
	if err != nil {
		return nil, err
	}
	sub, err := fs.Sub(assets, "assets")
	if err != nil {
		return nil, err
	}
	hn, _ := os.Hostname()
	s := &Server{
		hostname:  strings.ToLower(hn),
		token:     hex.EncodeToString(b[:]),
		inputs:    make(chan Input, 16),
		page:      page,
		static:    http.FileServerFS(sub),
		heartbeat: 15 * time.Second,
		subs:      map[chan []byte]struct{}{},
		closed:    make(chan struct{}),
	}
	s.body, _ = json.Marshal(s.state)
	return s, nil
}

// Inputs delivers what the technician does on the page, in order.
func (s *Server) Inputs() <-chan Input { return s.inputs }

// Token is this start's token: every POST must carry it.
func (s *Server) Token() string { return s.token }

// State returns the current state.
func (s *Server) State() State {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.state
}

// Apply reduces e into the state and sends the new state to every page.
func (s *Server) Apply(e Event) {
	s.mu.Lock()
	defer s.mu.Unlock()
	next := Reduce(s.state, e)
	if next.Seq == s.state.Seq {
		return
	}
	s.state = next
	body, err := json.Marshal(next)
	if err != nil {
		return // a State always marshals; nothing to show otherwise
	}
	s.body = body
	for ch := range s.subs {
		// Each page needs only the newest state: replace one not yet sent.
		select {
		case <-ch:
		default:
		}
		ch <- body
	}
}

// Close ends every open event stream (an http.Server's Shutdown waits for
// them otherwise); pages reconnect to a new start of the program.
func (s *Server) Close() { s.closeOnce.Do(func() { close(s.closed) }) }

// ServeHTTP serves the page, its assets, the event stream and the POSTs.
func (s *Server) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	w.Header().Set("X-Content-Type-Options", "nosniff")
	// A page of another site whose name was pointed at this station (DNS
	// rebinding) would send its own name as Host: serve only requests
	// addressed to this computer by IP address or by its own names.
	if !s.hostAllowed(r.Host) {
		http.Error(w, "unknown host name "+r.Host+": open the screen by the station's address", http.StatusMisdirectedRequest)
		return
	}
	switch r.URL.Path {
	case "/", "/index.html":
		s.servePage(w, r)
	case "/events":
		s.serveEvents(w, r)
	case "/state":
		s.mu.Lock()
		body := s.body
		s.mu.Unlock()
		w.Header().Set("Content-Type", "application/json")
		w.Header().Set("Cache-Control", "no-store")
		_, _ = w.Write(body)
	case "/scan", "/check", "/ack":
		s.servePost(w, r)
	default:
		if strings.HasSuffix(r.URL.Path, ".css") || strings.HasSuffix(r.URL.Path, ".js") || strings.HasSuffix(r.URL.Path, ".svg") {
			s.static.ServeHTTP(w, r)
			return
		}
		http.NotFound(w, r)
	}
}

func (s *Server) servePage(w http.ResponseWriter, r *http.Request) {
	if r.Method != http.MethodGet && r.Method != http.MethodHead {
		http.Error(w, "GET only", http.StatusMethodNotAllowed)
		return
	}
	w.Header().Set("Content-Type", "text/html; charset=utf-8")
	w.Header().Set("Cache-Control", "no-store")
	// The page may not be framed by another site (a framed page could be
	// clicked through); scripts and styles come from this station only.
	w.Header().Set("Content-Security-Policy", "default-src 'self'; frame-ancestors 'none'")
	_ = s.page.Execute(w, struct{ Token string }{s.token})
}

// serveEvents streams the state as server-sent events: the current state
// at once, then every new one.
func (s *Server) serveEvents(w http.ResponseWriter, r *http.Request) {
	fl, ok := w.(http.Flusher)
	if !ok {
		http.Error(w, "streaming unsupported", http.StatusInternalServerError)
		return
	}
	ch := make(chan []byte, 1)
	s.mu.Lock()
	ch <- s.body
	s.subs[ch] = struct{}{}
	s.mu.Unlock()
	defer func() {
		s.mu.Lock()
		delete(s.subs, ch)
		s.mu.Unlock()
	}()
	w.Header().Set("Content-Type", "text/event-stream")
	w.Header().Set("Cache-Control", "no-store")
	w.WriteHeader(http.StatusOK)
	fl.Flush()
	tick := time.NewTicker(s.heartbeat)
	defer tick.Stop()
	for {
		select {
		case <-r.Context().Done():
			return
		case <-s.closed:
			return
		case body := <-ch:
			if _, err := io.WriteString(w, "data: "+string(body)+"\n\n"); err != nil {
				return
			}
			fl.Flush()
		case <-tick.C:
			if _, err := io.WriteString(w, ": still here\n\n"); err != nil {
				return
			}
			fl.Flush()
		}
	}
}

// hostAllowed reports whether a request's Host names this computer: an IP
// address, localhost, or the computer's own host name (with or without
// .local).
func (s *Server) hostAllowed(hostport string) bool {
	host := hostport
	if h, _, err := net.SplitHostPort(hostport); err == nil {
		host = h
	}
	host = strings.ToLower(strings.TrimSuffix(strings.Trim(host, "[]"), "."))
	if net.ParseIP(host) != nil || host == "localhost" {
		return true
	}
	return s.hostname != "" && (host == s.hostname || host == s.hostname+".local")
}

// servePost takes one technician input. It must be a POST carrying this
// start's token in the X-Padline-Token header, so that a page from another
// site (or from an earlier start of the program) cannot act on the station.
func (s *Server) servePost(w http.ResponseWriter, r *http.Request) {
	if r.Method != http.MethodPost {
		w.Header().Set("Allow", http.MethodPost)
		http.Error(w, "POST only", http.StatusMethodNotAllowed)
		return
	}
	if o := r.Header.Get("Origin"); o != "" {
		if u, err := url.Parse(o); err != nil || u.Host != r.Host {
			http.Error(w, "request from another site", http.StatusForbidden)
			return
		}
	}
	got := r.Header.Get("X-Padline-Token")
	if subtle.ConstantTimeCompare([]byte(got), []byte(s.token)) != 1 {
		http.Error(w, "missing or stale token: reload the page", http.StatusForbidden)
		return
	}
	var body struct {
		Text string `json:"text"`
	}
	if err := json.NewDecoder(io.LimitReader(r.Body, 4096)).Decode(&body); err != nil && err != io.EOF {
		http.Error(w, "body: "+err.Error(), http.StatusBadRequest)
		return
	}
	in := Input{Text: body.Text}
	switch r.URL.Path {
	case "/scan":
		in.Kind = InputScan
	case "/check":
		in.Kind = InputStartCheck
	case "/ack":
		in.Kind = InputAckRepeat
	}
	select {
	case s.inputs <- in:
		w.WriteHeader(http.StatusAccepted)
	case <-r.Context().Done():
	case <-time.After(2 * time.Second):
		http.Error(w, "the station is busy: scan again", http.StatusServiceUnavailable)
	}
}
