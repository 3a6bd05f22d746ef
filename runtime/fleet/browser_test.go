package fleet

import (
	"context"
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"
	"github.com/godwit-fusion/godwit/transport"
	"github.com/godwit-fusion/godwit/transport/broker"
	"go.uber.org/goleak"
)

// chromium finds a Chromium binary: $GODWIT_CHROMIUM, else the usual names
// (Debian's package installs /usr/bin/chromium).
func chromium(t *testing.T) string {
	t.Helper()
	if p := os.Getenv("GODWIT_CHROMIUM"); p != "" {
		return p
	}
	for _, name := range []string{"chromium", "chromium-browser", "google-chrome", "headless-shell"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	msg := "no chromium binary found (apt-get install chromium, or set GODWIT_CHROMIUM): browser test skipped"
	if os.Getenv("CI") == "true" {
		t.Fatal(msg + " — but CI=true, where chromium must be installed")
	}
	t.Skip(msg)
	return ""
}

// The fleet page, in a real browser, shows a vehicle change state live:
// without a reload, from the Server-Sent Events stream.
func TestBrowserShowsStateChangeLive(t *testing.T) {
	exe := chromium(t)
	before := goleak.IgnoreCurrent()
	t.Cleanup(func() { goleak.VerifyNone(t, before) })
	b, err := broker.Start(broker.Config{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = b.Close() })
	root := uniqueRoot()
	m := startMonitor(t, b.URL(), StoreConfig{TopicRoot: root, SilentAfter: 3 * time.Second}, "")

	shuttle := newScriptedVehicle(t, b.URL(), root, "campus-shuttle-3", true)
	defer shuttle.c.Close()
	tractor := newScriptedVehicle(t, b.URL(), root, "yard-tractor-12", true)
	defer tractor.c.Close()
	robot := newScriptedVehicle(t, b.URL(), root, "warehouse-robot-5", true)
	defer robot.c.Close()
	shuttle.report("ok")
	robot.report("ok")
	tractor.report("degraded", transport.Alert{Code: "nis_inconsistent", Severity: "warning", Sensor: "front_lidar",
		SinceNs: time.Now().UnixNano(), Detail: "windowed mean NIS 4.9 outside [1.3, 2.8]"})
	for _, v := range []*scriptedVehicle{shuttle, tractor, robot} {
		defer v.beat(500 * time.Millisecond)()
	}
	waitFor(t, 5*time.Second, "three vehicles", func() bool { return len(m.Store().Changes(0, 0).Vehicles) == 3 })

	opts := []chromedp.ExecAllocatorOption{
		chromedp.ExecPath(exe),
		chromedp.Headless, chromedp.NoSandbox, chromedp.DisableGPU, chromedp.NoFirstRun,
		chromedp.Flag("disable-quic", true),
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true),
		chromedp.NoDefaultBrowserCheck,
		chromedp.UserDataDir(t.TempDir()),
		chromedp.WindowSize(1280, 720),
	}
	actx, cancelA := chromedp.NewExecAllocator(context.Background(), opts...)
	defer cancelA()
	ctx, cancelB := chromedp.NewContext(actx)
	defer cancelB()
	ctx, cancelT := context.WithTimeout(ctx, 60*time.Second)
	defer cancelT()

	row := `tr[data-vehicle="campus-shuttle-3"]`
	css := func(sel string) chromedp.CSS { return chromedp.CSS(sel) }
	if err := chromedp.Do(ctx, chromedp.Navigate(m.URL())); err != nil {
		t.Fatalf("navigate: %v", err)
	}
	if err := chromedp.Do(ctx,
		chromedp.WaitVisible(css(row+`[data-state="ok"]`)),
		chromedp.WaitVisible(css(`#link[data-live="yes"]`)),
		// A marker in the page's JS state: it survives only if the page is
		// not reloaded.
		chromedp.Evaluate[chromedp.Void](`window.godwitMarker = "same page"`),
	); err != nil {
		t.Fatalf("page did not show the shuttle ok: %v", err)
	}

	shuttle.report("degraded", transport.Alert{Code: "sensor_silent", Severity: "warning", Sensor: "rear_camera",
		SinceNs: time.Now().UnixNano(), Detail: "no message for 240 ms (period 66 ms)"})
	if err := chromedp.Do(ctx, chromedp.WaitVisible(css(row+`[data-state="degraded"]`))); err != nil {
		t.Fatalf("page did not show the change: %v", err)
	}
	// Read in one script: the page re-renders a row on every heartbeat, so
	// a node looked up first and read after can be gone by then ("No node
	// with given id found").
	text := func(sel string) string {
		t.Helper()
		q, _ := json.Marshal(sel)
		s, err := chromedp.Run(ctx, chromedp.Evaluate[string](`(document.querySelector(`+string(q)+`) || {innerText: ""}).innerText`))
		if err != nil {
			t.Fatalf("text of %s: %v", sel, err)
		}
		return s
	}
	marker, err := chromedp.Run(ctx, chromedp.Evaluate[string](`window.godwitMarker`))
	if err != nil || marker != "same page" {
		t.Fatalf("the page was reloaded (marker %q, %v): the change must arrive live", marker, err)
	}
	if st, al := text(row+` .state`), text(row+` .alerts`); !strings.EqualFold(st, "degraded") || al != "sensor_silent rear_camera" {
		t.Fatalf("row shows state %q alerts %q", st, al)
	}
	if tl := text(`#timeline`); !strings.Contains(tl, "raised sensor_silent rear_camera") || !strings.Contains(tl, "ok → degraded") {
		t.Fatalf("timeline lacks the change: %q", tl)
	}

	// The tractor drops off the broker without a goodbye: the last will.
	b.Kick(root + "-" + tractor.id)
	if err := chromedp.Do(ctx,
		chromedp.WaitVisible(css(`tr[data-vehicle="yard-tractor-12"][data-state="offline"]`)),
		chromedp.Sleep(1300*time.Millisecond), // let the highlight fade for the picture
	); err != nil {
		t.Fatalf("page did not show the tractor offline: %v", err)
	}
	png, err := chromedp.Run(ctx, chromedp.FullScreenshot(100)) // quality 100: PNG
	if err != nil {
		t.Fatal(err)
	}
	shot := filepath.Join(t.TempDir(), "fleet.png")
	if err := os.WriteFile(shot, png, 0o644); err != nil {
		t.Fatal(err)
	}
	if keep := os.Getenv("GODWIT_FLEET_SCREENSHOT"); keep != "" {
		if err := os.WriteFile(keep, png, 0o644); err != nil {
			t.Fatal(err)
		}
		t.Logf("screenshot kept at %s", keep)
	}
	if len(png) < 8 || string(png[1:4]) != "PNG" { // PNG signature (ISO/IEC 15948 §5.2; section from memory)
		t.Fatalf("screenshot is not a PNG (%d bytes)", len(png))
	}
	cancelT()
	cancelB()
	cancelA()
}
