package screen_test

import (
	"bufio"
	"context"
	"encoding/json"
	"io"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"padline/sequences"
	"padline/sequences/session"
	"padline/sequences/station/screen"
)

func newServer(t *testing.T) (*screen.Server, *httptest.Server) {
	t.Helper()
	s, err := screen.NewServer()
	if err != nil {
		t.Fatal(err)
	}
	hs := httptest.NewServer(s)
	t.Cleanup(hs.Close)
	return s, hs
}

func TestPageCarriesToken(t *testing.T) {
	s, hs := newServer(t)
	res, err := http.Get(hs.URL + "/")
	if err != nil {
		t.Fatal(err)
	}
	body, _ := io.ReadAll(res.Body)
	res.Body.Close()
	if !strings.Contains(string(body), `content="`+s.Token()+`"`) || len(s.Token()) != 32 {
		t.Errorf("page does not carry the 128-bit token %q", s.Token())
	}
	for _, asset := range []string{"/screen.css", "/screen.js"} {
		res, err := http.Get(hs.URL + asset)
		if err != nil {
			t.Fatal(err)
		}
		res.Body.Close()
		if res.StatusCode != http.StatusOK {
			t.Errorf("%s: %s", asset, res.Status)
		}
	}
	s2, _ := screen.NewServer()
	if s2.Token() == s.Token() {
		t.Error("two starts share a token")
	}
}

func post(t *testing.T, url, token, body string) int {
	t.Helper()
	req, _ := http.NewRequest(http.MethodPost, url, strings.NewReader(body))
	if token != "" {
		req.Header.Set("X-Padline-Token", token)
	}
	res, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	res.Body.Close()
	return res.StatusCode
}

func TestPostsNeedTokenAndPost(t *testing.T) {
	s, hs := newServer(t)
	for _, c := range []struct {
		path, token string
		want        int
	}{
		{"/scan", "", http.StatusForbidden},
		{"/scan", "00000000000000000000000000000000", http.StatusForbidden},
		{"/check", "", http.StatusForbidden},
		{"/ack", s.Token()[:10], http.StatusForbidden},
	} {
		if got := post(t, hs.URL+c.path, c.token, `{"text":"QM205-000001"}`); got != c.want {
			t.Errorf("POST %s with token %q: %d, want %d", c.path, c.token, got, c.want)
		}
	}
	res, err := http.Get(hs.URL + "/scan?text=QM205-000001")
	if err != nil {
		t.Fatal(err)
	}
	res.Body.Close()
	if res.StatusCode != http.StatusMethodNotAllowed {
		t.Errorf("GET /scan: %d, want 405", res.StatusCode)
	}
	select {
	case in := <-s.Inputs():
		t.Fatalf("refused request delivered %+v", in)
	default:
	}
	for _, c := range []struct {
		path string
		want screen.Input
	}{
		{"/scan", screen.Input{Kind: screen.InputScan, Text: "QM205-000001"}},
		{"/check", screen.Input{Kind: screen.InputStartCheck, Text: "QM205-000001"}},
		{"/ack", screen.Input{Kind: screen.InputAckRepeat, Text: "QM205-000001"}},
	} {
		if got := post(t, hs.URL+c.path, s.Token(), `{"text":"QM205-000001"}`); got != http.StatusAccepted {
			t.Fatalf("POST %s: %d", c.path, got)
		}
		if in := <-s.Inputs(); in != c.want {
			t.Errorf("POST %s delivered %+v, want %+v", c.path, in, c.want)
		}
	}
}

// The event stream sends the state at once and then every change.
func TestEventStream(t *testing.T) {
	s, hs := newServer(t)
	s.Apply(session.Event{Kind: session.KindSessionStarted, Started: &session.Started{Station: "L2-S1", Simulated: true}})
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	req, _ := http.NewRequestWithContext(ctx, http.MethodGet, hs.URL+"/events", nil)
	res, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	if ct := res.Header.Get("Content-Type"); ct != "text/event-stream" {
		t.Errorf("content type %q", ct)
	}
	rd := bufio.NewReader(res.Body)
	next := func() screen.State {
		t.Helper()
		for {
			line, err := rd.ReadString('\n')
			if err != nil {
				t.Fatal(err)
			}
			if data, ok := strings.CutPrefix(line, "data: "); ok {
				var st screen.State
				if err := json.Unmarshal([]byte(data), &st); err != nil {
					t.Fatal(err)
				}
				return st
			}
		}
	}
	if st := next(); st.Station != "L2-S1" || !st.Simulated {
		t.Errorf("first state %+v", st)
	}
	s.Apply(verdict(7, "QM205-000007", sequences.Fail, sequences.CodeNoTrip, nan(), 0))
	st := next()
	if st.Last == nil || st.Last.RunID != 7 || st.Last.Do == "" || st.Counts.Fail != 1 {
		t.Errorf("state after commit %+v last %+v", st, st.Last)
	}
}

// Requests for another host name (a rebound DNS name) and POSTs from
// another origin are refused.
func TestForeignHostAndOrigin(t *testing.T) {
	s, hs := newServer(t)
	for _, c := range []struct {
		host, origin string
		want         int
	}{
		{"attacker.example:8080", "", http.StatusMisdirectedRequest},
		{"localhost:8080", "", http.StatusAccepted},
		{"[::1]:8080", "", http.StatusAccepted},
		{"", "http://attacker.example", http.StatusForbidden},
	} {
		req, _ := http.NewRequest(http.MethodPost, hs.URL+"/scan", strings.NewReader(`{"text":"A"}`))
		req.Header.Set("X-Padline-Token", s.Token())
		if c.host != "" {
			req.Host = c.host
		}
		if c.origin != "" {
			req.Header.Set("Origin", c.origin)
		}
		res, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		res.Body.Close()
		if res.StatusCode != c.want {
			t.Errorf("host %q origin %q: %d, want %d", c.host, c.origin, res.StatusCode, c.want)
		}
		if res.StatusCode == http.StatusAccepted {
			<-s.Inputs()
		}
	}
}

func TestIsLoopback(t *testing.T) {
	for host, want := range map[string]bool{
		"127.0.0.1": true, "127.3.2.1": true, "::1": true, "localhost": true,
		"0.0.0.0": false, "": false, "192.168.1.20": false, "station.local": false,
	} {
		if got := screen.IsLoopback(host); got != want {
			t.Errorf("IsLoopback(%q) = %v, want %v", host, got, want)
		}
	}
}
