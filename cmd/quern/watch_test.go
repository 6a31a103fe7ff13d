package main

import (
	"bufio"
	"context"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"testing"
	"time"

	"github.com/quernlab/quern/internal/browser"
	"github.com/stretchr/testify/require"
)

// quern train -watch serves a page that a headless Chromium sees update
// as the run trains: at least two updates with epochs drawn, then the
// end of the run, with the figures loaded and no console error.
func TestWatchPageUpdatesInBrowser(t *testing.T) {
	b := browser.ForTest(t)
	dir := t.TempDir()
	images := abs("../../testdata/fashion-mnist/train-images-idx3-ubyte-first2000.gz")
	cmd := exec.Command(bin, "train", "-kind", "vae", "-data", images, "-hidden", "256", "-latent", "8", "-epochs", "30",
		"-out", filepath.Join(dir, "w.qm"), "-watch", "127.0.0.1:0")
	cmd.Dir = dir
	stderr, err := cmd.StderrPipe()
	require.NoError(t, err)
	require.NoError(t, cmd.Start())
	t.Cleanup(func() { cmd.Process.Kill(); cmd.Wait() })
	url := make(chan string, 1)
	go func() {
		sc := bufio.NewScanner(stderr)
		re := regexp.MustCompile(`watch the run at (http://127\.0\.0\.1:\d+/)`)
		for sc.Scan() {
			if m := re.FindStringSubmatch(sc.Text()); m != nil {
				url <- m[1]
			}
		}
	}()
	var u string
	select {
	case u = <-url:
	case <-time.After(30 * time.Second):
		t.Fatal("quern train -watch did not say where its page is")
	}
	ctx := context.Background()
	require.NoError(t, b.Open(ctx, u))
	require.NoError(t, b.WaitFor(ctx, `Number(document.getElementById("updates").textContent) >= 2 && document.querySelectorAll("#charts canvas").length >= 1`, 60*time.Second))
	var first int
	require.NoError(t, b.Eval(ctx, `Number(document.getElementById("updates").textContent)`, &first))
	if d := os.Getenv("QUERN_SCREENSHOTS"); d != "" {
		time.Sleep(time.Second)
		png, err := b.Screenshot(ctx)
		require.NoError(t, err)
		require.NoError(t, os.WriteFile(filepath.Join(d, "watch.png"), png, 0o644))
	}
	require.NoError(t, b.WaitFor(ctx, `document.getElementById("status").className !== ""`, 120*time.Second), "the page learns that the run ended")
	var class, text string
	require.NoError(t, b.Eval(ctx, `document.getElementById("status").className`, &class))
	require.NoError(t, b.Eval(ctx, `document.getElementById("status").textContent`, &text))
	require.Equal(t, "done", class, text)
	require.Contains(t, text, "the run has finished")
	var last int
	require.NoError(t, b.Eval(ctx, `Number(document.getElementById("updates").textContent)`, &last))
	require.Greater(t, last, first, "the page kept updating while the run trained")
	var bad []string
	require.NoError(t, b.Eval(ctx, browser.ImagesCheck, &bad))
	require.Empty(t, bad)
	var figs int
	require.NoError(t, b.Eval(ctx, `document.querySelectorAll("#figures img").length`, &figs))
	require.GreaterOrEqual(t, figs, 1, "a sample grid for an image model")
	require.Empty(t, b.Errors(), "console errors")
	require.NoError(t, cmd.Wait())
}
