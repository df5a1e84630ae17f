package plant

import (
	"errors"
	"strings"

	"github.com/jackc/pgx/v5/pgconn"
)

// The setup faults a technician meets on the way to a working plant store
// (README "The plant store"), each with what to do about it. A fault is
// known by the SQLSTATE PostgreSQL gives it (PostgreSQL 15 documentation,
// Appendix A "PostgreSQL Error Codes") or by the dial error Go's net
// package gives; the first match wins.
var hints = []struct {
	has  []string // all of these in the message
	what string
}{
	{[]string{"connection refused"}, "nothing answers at the plant URL's host and port: check them, and that PostgreSQL runs there and listens on that address (a station keeps testing and forwards its backlog once it answers)"},
	{[]string{"no such host"}, "the plant URL's host name does not resolve: check its spelling and the station's DNS"},
	{[]string{"i/o timeout"}, "the plant store's host does not answer: check the network and firewall between here and it"},
	{[]string{"SQLSTATE 3D000"}, "the plant URL names a database that does not exist: check its name, or create it (createdb -O OWNER NAME, README \"The plant store\")"},
	{[]string{"SQLSTATE 28000", "does not exist"}, "the plant URL's user is no role on that server: check it; 'padline plant add-station NAME --role ROLE' makes a station's role, 'padline plant add-reader ROLE' a reader's"},
	{[]string{"SQLSTATE 28000"}, "the server's pg_hba.conf lets that role in from nowhere here: add a rule for it"},
	{[]string{"SQLSTATE 28P01"}, "wrong password for the plant URL's role: check the password in the URL ($PADLINE_PLANT_URL); ALTER ROLE … PASSWORD sets it"},
	{[]string{"SQLSTATE 42P01"}, plantInit},
	{[]string{"SQLSTATE 42883"}, plantInit},
	{[]string{"SQLSTATE 42703"}, plantInit},
	{[]string{"SQLSTATE 3F000"}, "the schema the URL's search_path names does not exist: CREATE SCHEMA it as the plant's owner, then 'padline plant init'"},
	{[]string{"SQLSTATE 42501", "row-level security"}, "the plant URL's role is not this station's: a station forwards as the role 'padline plant add-station NAME --role ROLE' gave it ('padline plant stations' lists them)"},
	{[]string{"SQLSTATE 42501", "create role"}, "the --db role may not create roles: as a superuser, ALTER ROLE it CREATEROLE (README \"The plant store\"), or create the role first"},
	{[]string{"SQLSTATE 42501"}, roles},
	{[]string{"SQLSTATE 25006"}, "the plant URL's role is read-only (an add-reader role); " + roles},
}

const (
	plantInit = "the plant schema is missing or older than this padline: run 'padline plant init --db postgres://OWNER@HOST/DB' as the plant's owner"
	roles     = "use the role made for the job: a station forwards as its add-station role, the line board, history and drift read as an add-reader role, and plant init, add-station, add-reader and drift baseline set run as the plant's owner"
)

// Hint returns err on one line with what to do about it when it is a
// plant store setup fault (a server that does not answer, an unknown
// database or role, a wrong password, a missing privilege, a schema missing
// or older than the program); any other error comes back as it is.
func Hint(err error) error {
	var pe *pgconn.PgError
	var ce *pgconn.ConnectError
	if err == nil || !(errors.As(err, &pe) || errors.As(err, &ce)) {
		return err
	}
	msg := HintText(err.Error())
	if msg == err.Error() {
		return err
	}
	return &hinted{err: err, msg: msg}
}

// hinted is an error with its message rewritten by HintText.
type hinted struct {
	err error
	msg string
}

func (h *hinted) Error() string { return h.msg }
func (h *hinted) Unwrap() error { return h.err }

// HintText is Hint for a message kept as text (a forwarder's last error in
// the shift log): the message on one line, its repeated lines once, and
// the known fault's remedy after " — what to do: ".
func HintText(msg string) string {
	one := oneLine(msg)
	if what := remedy(msg); what != "" {
		return one + " — what to do: " + what
	}
	return one
}

// remedy returns what to do about the first known fault msg shows, ""
// when none, or when msg already says it (the schema's own hints name
// 'padline plant init').
func remedy(msg string) string {
	if strings.Contains(msg, "padline plant init") {
		return ""
	}
	low := strings.ToLower(msg)
	for _, h := range hints {
		ok := true
		for _, s := range h.has {
			if !strings.Contains(msg, s) && !strings.Contains(low, s) {
				ok = false
				break
			}
		}
		if ok {
			return h.what
		}
	}
	return ""
}

// oneLine joins a multi-line message (the driver lists every address it
// tried, each on a line of its own, one per TLS attempt) into one line,
// each distinct line once.
func oneLine(msg string) string {
	if !strings.Contains(msg, "\n") {
		return msg
	}
	seen := map[string]bool{}
	var out []string
	for _, l := range strings.Split(msg, "\n") {
		l = strings.TrimSpace(l)
		if l != "" && !seen[l] {
			seen[l] = true
			out = append(out, l)
		}
	}
	return strings.Join(out, " ")
}
