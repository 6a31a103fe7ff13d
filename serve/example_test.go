package serve_test

import (
	"context"
	"fmt"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/serve"
	"github.com/quernlab/quern/train"
)

func Example() {
	// A tiny meter model: two readings that move together.
	x := make([]float32, 0, 400)
	for i := 0; i < 200; i++ {
		v := float32(i%20) / 20
		x = append(x, v, 2*v)
	}
	d, _ := data.New(x, 200, 2)
	m, _ := ae.New(ae.Config{Inputs: 2, Hidden: []int{4}, Latent: 1, Seed: 1})
	t, _ := train.New(m, train.Settings{Epochs: 5})
	t.Run(context.Background(), d, nil)
	m.Calibrate(d.X, d.Rows, anomaly.Config{Method: anomaly.Max})
	dir, _ := os.MkdirTemp("", "serve")
	defer os.RemoveAll(dir)
	path := filepath.Join(dir, "meter.qm")
	m.Save(path, nil)

	s, err := serve.New(serve.Config{ModelPath: path})
	if err != nil {
		fmt.Println(err)
		return
	}
	rec := httptest.NewRecorder()
	s.Handler().ServeHTTP(rec, httptest.NewRequest(http.MethodPost, "/v1/score", strings.NewReader(`{"rows": [[0.5, 1.0]]}`)))
	fmt.Println(rec.Code, strings.Contains(rec.Body.String(), `"anomaly":`))
	rec = httptest.NewRecorder()
	s.Handler().ServeHTTP(rec, httptest.NewRequest(http.MethodPost, "/v1/score", strings.NewReader(`{"rows": [[0.5]]}`)))
	fmt.Print(rec.Code, " ", rec.Body.String())
	// Output:
	// 200 true
	// 400 {"error":"row 1 has 1 columns, the model takes 2"}
}
