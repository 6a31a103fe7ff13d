package main

import (
	"context"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"testing"

	"github.com/quernlab/quern/internal/browser"
	"github.com/stretchr/testify/require"
)

// Every report page the command line writes loads in a headless
// Chromium with every figure shown at a non-zero size, no console error,
// and its numbers in a table: an autoencoder and a GAN on a table, a VAE
// on images, and the demo.
func TestReportPagesInBrowser(t *testing.T) {
	dir := t.TempDir()
	runs := map[string][]string{
		"ae":  {"train", "-kind", "ae", "-data", bc, "-no-header", "-skip", "1", "-label", "c30", "-out", "ae.qm", "-epochs", "4", "-report", "ae", "-quiet"},
		"gan": {"train", "-kind", "gan", "-data", bc, "-no-header", "-skip", "1", "-label", "c30", "-out", "gan.qm", "-epochs", "3", "-report", "gan", "-quiet"},
		"vae": {"train", "-kind", "vae", "-data", fmImages, "-labels", fmLabels, "-hidden", "64", "-latent", "4", "-out", "vae.qm", "-epochs", "2", "-report", "vae", "-quiet"},
	}
	for _, args := range runs {
		ok(t, quern(t, dir, nil, args...))
	}
	ok(t, quern(t, dir, nil, "demo", "-short", "-out", "demo", "-quiet"))
	srv := httptest.NewServer(http.FileServer(http.Dir(dir)))
	defer srv.Close()
	b := browser.ForTest(t)
	ctx := context.Background()
	for _, page := range []string{"ae", "gan", "vae", "demo/report"} {
		t.Run(page, func(t *testing.T) {
			require.NoError(t, b.Open(ctx, srv.URL+"/"+page+"/index.html"))
			var bad []string
			require.NoError(t, b.Eval(ctx, browser.ImagesCheck, &bad))
			require.Empty(t, bad, "images that did not load or show")
			var n int
			require.NoError(t, b.Eval(ctx, `document.images.length`, &n))
			files, _ := filepath.Glob(filepath.Join(dir, page, "*.png"))
			require.Equal(t, len(files), n, "every figure written is on the page")
			var summary bool
			require.NoError(t, b.Eval(ctx, `Array.from(document.querySelectorAll("h2")).some(h => h.textContent === "Results")`, &summary))
			require.True(t, summary, "the page has its numbers")
			var meta string
			require.NoError(t, b.Eval(ctx, `document.querySelector(".meta").textContent`, &meta))
			require.Regexp(t, `Written \d{4}-\d\d-\d\d \d\d:\d\d UTC by quern`, meta)
			if os.Getenv("QUERN_SCREENSHOTS") != "" {
				png, err := b.Screenshot(ctx)
				require.NoError(t, err)
				require.NoError(t, os.WriteFile(filepath.Join(os.Getenv("QUERN_SCREENSHOTS"), filepath.Base(page)+".png"), png, 0o644))
			}
		})
	}
	require.Empty(t, b.Errors(), "console errors")
	var faults int
	require.NoError(t, b.Eval(ctx, `document.querySelectorAll("caption").length`, &faults))
	require.Equal(t, 1, faults, "the demo page has its per-fault table")
}
