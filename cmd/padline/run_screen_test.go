package main

import (
	"testing"
)

// --screen alone serves on this computer only; --screen=ADDR elsewhere;
// no --screen, no screen.
func TestScreenFlag(t *testing.T) {
	for _, c := range []struct {
		args []string
		want string
	}{
		{nil, ""},
		{[]string{"--screen"}, "127.0.0.1:8080"},
		{[]string{"--screen=0.0.0.0:9000"}, "0.0.0.0:9000"},
	} {
		a := &app{}
		cmd := a.runCmd()
		if err := cmd.ParseFlags(c.args); err != nil {
			t.Fatal(err)
		}
		if got := cmd.Flags().Lookup("screen").Value.String(); got != c.want {
			t.Errorf("%v: screen %q, want %q", c.args, got, c.want)
		}
	}
}
