package chart_test

import (
	"bytes"
	"errors"
	"flag"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"padline/store/drift"
	"padline/store/drift/chart"
)

var keep = flag.String("keep", "", "also write the test charts into this directory for viewing")

// series: 200 trip points about 16.7 pF, σ 0.2 pF, a +1σ step at unit 121.
func series() []float64 {
	rng := rand.New(rand.NewPCG(11, 0))
	x := make([]float64, 200)
	for i := range x {
		x[i] = 16.7 + 0.2*rng.NormFloat64()
		if i >= 120 {
			x[i] += 0.2
		}
	}
	return x
}

func TestRender(t *testing.T) {
	x := series()
	w := drift.FirstN(60)
	imr, err := drift.IndividualsChart(x, w, drift.Options{})
	if err != nil {
		t.Fatal(err)
	}
	watch, err := drift.WatchSeries(x, w, drift.Options{}, drift.DefaultSet)
	if err != nil {
		t.Fatal(err)
	}
	ew, err := drift.EWMAChart(x, w, drift.Options{})
	if err != nil {
		t.Fatal(err)
	}
	xr, err := drift.XbarRChart(x, 5, w, drift.Options{})
	if err != nil {
		t.Fatal(err)
	}
	o := chart.Options{Quantity: "trip point", Unit: "pF"}
	cases := []struct {
		name   string
		charts []drift.Chart
	}{
		{"imr", []drift.Chart{imr.Location, imr.Spread}},
		{"watch", watch.Charts},
		{"ewma", []drift.Chart{ew}},
		{"xbar-r", []drift.Chart{xr.Location, xr.Spread}},
	}
	dir := t.TempDir()
	for _, tc := range cases {
		for _, f := range []struct {
			ext    string
			header []byte
		}{{"png", []byte("\x89PNG\r\n\x1a\n")}, {"svg", []byte("<?xml")}} {
			path := filepath.Join(dir, tc.name+"."+f.ext)
			if err := chart.WriteFile(path, o, tc.charts...); err != nil {
				t.Fatalf("%s: %v", path, err)
			}
			b, err := os.ReadFile(path)
			if err != nil {
				t.Fatal(err)
			}
			if len(b) < 1000 || !bytes.HasPrefix(b, f.header) {
				t.Errorf("%s: %d bytes, header %q", path, len(b), b[:min(len(b), 8)])
			}
			if f.ext == "svg" && !bytes.Contains(b, []byte("<svg")) {
				t.Errorf("%s: no <svg element", path)
			}
			if *keep != "" {
				if err := os.WriteFile(filepath.Join(*keep, tc.name+"."+f.ext), b, 0o644); err != nil {
					t.Fatal(err)
				}
			}
		}
	}
}

func TestRenderErrors(t *testing.T) {
	c, err := drift.EWMAChart(series(), drift.FirstN(50), drift.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if err := chart.WriteFile(filepath.Join(t.TempDir(), "x.pdf"), chart.Options{}, c); !errors.Is(err, chart.ErrFormat) {
		t.Errorf("pdf: %v", err)
	}
	var buf bytes.Buffer
	if err := chart.Render(&buf, chart.SVG, chart.Options{}); err == nil {
		t.Error("no charts: want an error")
	}
}
