package dashboard

import (
	"bytes"
	"context"
	"image/png"
	"net"
	"net/http"
	"net/http/httptest"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"
)

// chromiumFlags keep a headless Chromium offline apart from the page under
// test: no sync, updates, background requests or QUIC.
var chromiumFlags = []string{
	"--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
	"--disable-background-networking", "--disable-component-update", "--disable-sync",
	"--hide-scrollbars", "--enable-logging=stderr", "--v=0",
}

// findChromium returns Debian's chromium. Without it the test fails when
// CI is set (.ci/run installs it) and is skipped otherwise.
func findChromium(t *testing.T) string {
	t.Helper()
	for _, name := range []string{"chromium", "chromium-browser"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	if os.Getenv("CI") != "" {
		t.Fatal("chromium is not installed (apt-get install -y chromium)")
	}
	t.Skip("chromium is not installed (apt-get install -y chromium); set CI to make this a failure")
	return ""
}

// runChromium runs one headless Chromium on url with extra flags and
// returns its stdout and the page's console messages (from its log).
func runChromium(t *testing.T, bin, url string, extra ...string) (stdout []byte, console []string) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
	defer cancel()
	args := append(append(append([]string{}, chromiumFlags...), "--user-data-dir="+t.TempDir()), extra...)
	cmd := exec.CommandContext(ctx, bin, append(args, url)...)
	var out, errOut bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &errOut
	if err := cmd.Run(); err != nil {
		t.Fatalf("chromium %v: %v\n%s", extra, err, clip(errOut.String(), 2000))
	}
	for _, line := range strings.Split(errOut.String(), "\n") {
		if strings.Contains(line, ":CONSOLE") {
			console = append(console, line)
		}
	}
	return out.Bytes(), console
}

// TestBrowserRendersDashboard loads the dashboard served from the replayed
// demo store on a loopback port in headless Chromium, checks the rendered
// DOM (every chart an SVG with marks, the page's text, no console message:
// the page has no scripts, so any message is a blocked or failed load) and
// the screenshot (a real PNG of the window's size with many colours). With
// -update the screenshot becomes docs/dashboard.png.
func TestBrowserRendersDashboard(t *testing.T) {
	bin := findChromium(t)
	if testing.Short() && os.Getenv("CI") == "" {
		t.Skip("browser test skipped with -short")
	}
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	open := sharedDemo(t)
	truth, err := shared.world.truth()
	if err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewUnstartedServer(NewHandler(Options{Open: open, Title: "touchledger · Lantern & Moss demo", Truth: truth}))
	srv.Listener.Close()
	srv.Listener = ln
	srv.Start()
	defer srv.Close()
	url := srv.URL + "/"
	if res, err := http.Get(url); err != nil || res.StatusCode != http.StatusOK {
		t.Fatalf("GET %s: %v %v", url, err, res)
	}

	dom, console := runChromium(t, bin, url, "--dump-dom", "--virtual-time-budget=3000")
	if len(console) > 0 {
		t.Errorf("console messages:\n%s", strings.Join(console, "\n"))
	}
	for _, want := range []string{"Credit per channel per day", "Where journeys go next", "All models side by side",
		"simulated true share", "Where sessions go next", "Funnel and step abandonment", "Abandonment over time", "Abandonment close-up"} {
		if !bytes.Contains(dom, []byte(want)) {
			t.Errorf("rendered page lacks %q", want)
		}
	}
	svgs := regexp.MustCompile(`(?s)<svg .*?</svg>`).FindAll(dom, -1)
	if len(svgs) != 7 {
		t.Errorf("rendered page has %d SVGs, want 7", len(svgs))
	}
	marks := regexp.MustCompile(`<(rect|path|circle|g)\b[^>]*\bdata-values?=`)
	for _, svg := range svgs {
		kind := regexp.MustCompile(`data-chart="([a-z]+)"`).FindSubmatch(svg)
		if n := len(marks.FindAll(svg, -1)); n == 0 || kind == nil {
			t.Errorf("an SVG (%s) has no marks with values", kind)
		}
	}

	shotPath := filepath.Join(t.TempDir(), "dashboard.png")
	_, console = runChromium(t, bin, url, "--screenshot="+shotPath, "--window-size=1400,2400", "--virtual-time-budget=3000")
	if len(console) > 0 {
		t.Errorf("console messages:\n%s", strings.Join(console, "\n"))
	}
	shot, err := os.ReadFile(shotPath)
	if err != nil {
		t.Fatal(err)
	}
	img, err := png.Decode(bytes.NewReader(shot))
	if err != nil {
		t.Fatalf("screenshot is not a PNG: %v", err)
	}
	if b := img.Bounds(); b.Dx() != 1400 || b.Dy() != 2400 {
		t.Errorf("screenshot is %dx%d, want 1400x2400", b.Dx(), b.Dy())
	}
	colours := map[[3]uint32]bool{}
	b := img.Bounds()
	for y := b.Min.Y; y < b.Max.Y; y += 3 {
		for x := b.Min.X; x < b.Max.X; x += 3 {
			r, g, bl, _ := img.At(x, y).RGBA()
			colours[[3]uint32{r >> 8, g >> 8, bl >> 8}] = true
		}
	}
	if len(colours) < 200 {
		t.Errorf("screenshot has %d colours, want a drawn page (at least 200)", len(colours))
	}
	if *update {
		if err := os.WriteFile(filepath.Join("..", "..", "docs", "dashboard.png"), shot, 0o644); err != nil {
			t.Fatal(err)
		}
	}
}
