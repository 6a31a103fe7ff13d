package browser

import (
	"context"
	"net/http"
	"net/http/httptest"
	"testing"

	"github.com/stretchr/testify/require"
)

// RFC 6455, section 1.3, gives this key and its accept value.
func TestAcceptKey(t *testing.T) {
	require.Equal(t, "s3pPLMBiTxaQ9kYGzzhZRbK+xOo=", acceptKey("dGhlIHNhbXBsZSBub25jZQ=="))
}

// The browser reports a page's broken image and its console error, and
// evaluates expressions in it.
func TestPageChecks(t *testing.T) {
	png := []byte("\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR\x00\x00\x00\x01\x00\x00\x00\x01\x08\x06\x00\x00\x00\x1f\x15\xc4\x89\x00\x00\x00\rIDATx\x9cc\xf8\xcf\xc0\xf0\x1f\x00\x05\x00\x01\xff\x89\x99=\x1d\x00\x00\x00\x00IEND\xaeB`\x82")
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		switch r.URL.Path {
		case "/good.png":
			w.Header().Set("Content-Type", "image/png")
			w.Write(png)
		case "/":
			w.Write([]byte(`<!doctype html><img src="good.png" width="10"><img src="missing.png" width="10"><script>console.error("boom")</script><p id="x">42</p>`))
		default:
			http.NotFound(w, r)
		}
	}))
	defer srv.Close()
	b := ForTest(t)
	ctx := context.Background()
	require.NoError(t, b.Open(ctx, srv.URL+"/"))
	var bad []string
	require.NoError(t, b.Eval(ctx, ImagesCheck, &bad))
	require.Equal(t, []string{"missing.png: not loaded"}, bad)
	var text string
	require.NoError(t, b.Eval(ctx, `document.getElementById("x").textContent`, &text))
	require.Equal(t, "42", text)
	require.NoError(t, b.WaitFor(ctx, `true`, 0))
	errs := b.Errors()
	require.Contains(t, errs, "console.error: boom")
}
