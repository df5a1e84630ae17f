// Package screentest starts a headless Chromium for the station screen's
// browser tests and saves their screenshots. It is imported by tests only.
//
// A missing Chromium skips the test with a one-line reason, unless the
// environment variable PADLINE_REQUIRE_PARTS=1 is set (as .ci/run does):
// then the test fails with that reason.
package screentest

import (
	"context"
	"os"
	"os/exec"
	"path/filepath"
	"testing"

	"github.com/chromedp/chromedp"
)

// Browser returns a chromedp context on a fresh headless Chromium that is
// closed when the test ends.
func Browser(t testing.TB) context.Context {
	t.Helper()
	path := ""
	for _, name := range []string{"chromium", "chromium-browser", "google-chrome"} {
		if p, err := exec.LookPath(name); err == nil {
			path = p
			break
		}
	}
	if path == "" {
		const reason = "no chromium on PATH (apt-get install -y chromium)"
		if os.Getenv("PADLINE_REQUIRE_PARTS") == "1" {
			t.Fatal(reason)
		}
		t.Skip(reason)
	}
	opts := []chromedp.ExecAllocatorOption{
		chromedp.ExecPath(path),
		chromedp.Headless,
		chromedp.NoSandbox,
		chromedp.DisableGPU,
		chromedp.NoFirstRun,
		chromedp.NoDefaultBrowserCheck,
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-quic", true),
		chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true),
		chromedp.Flag("hide-scrollbars", true),
		chromedp.UserDataDir(t.TempDir()),
	}
	actx, cancelA := chromedp.NewExecAllocator(context.Background(), opts...)
	ctx, cancelB := chromedp.NewContext(actx)
	t.Cleanup(func() { cancelB(); cancelA() })
	if err := chromedp.Do(ctx); err != nil {
		t.Fatalf("start chromium %s: %v", path, err)
	}
	return ctx
}

// ArtifactDir is where browser tests save screenshots: $PADLINE_ARTIFACTS
// when set, else a padline-artifacts folder in the system's temporary
// directory. Screenshots are test output, never committed.
func ArtifactDir(t testing.TB) string {
	t.Helper()
	dir := os.Getenv("PADLINE_ARTIFACTS")
	if dir == "" {
		dir = filepath.Join(os.TempDir(), "padline-artifacts")
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	return dir
}

// SaveScreenshot writes a PNG screenshot of the whole viewport to name in
// ArtifactDir and returns its path.
func SaveScreenshot(t testing.TB, ctx context.Context, name string) string {
	t.Helper()
	png, err := chromedp.Run(ctx, chromedp.CaptureScreenshot())
	if err != nil {
		t.Fatalf("screenshot %s: %v", name, err)
	}
	p := filepath.Join(ArtifactDir(t), name)
	if err := os.WriteFile(p, png, 0o644); err != nil {
		t.Fatal(err)
	}
	t.Logf("screenshot: %s", p)
	return p
}
