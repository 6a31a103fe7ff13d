package watch_test

import (
	"encoding/json"
	"fmt"
	"net/http"
	"net/http/httptest"

	"github.com/quernlab/quern/watch"
)

// A training loop reports to a Page; browsers open its handler's "/" and
// follow "/events". Here a client reads the state once.
func Example() {
	p := watch.New("autoencoder on readings.csv")
	srv := httptest.NewServer(p.Handler())
	defer srv.Close()
	p.SetStatus(watch.Status{Phase: "train", Epoch: 1, Epochs: 3, Step: 10, Steps: 10})
	p.AddEpoch(watch.Epoch{Epoch: 1, Train: []watch.Metric{{Name: "loss", Value: 0.42}}, Validation: []watch.Metric{{Name: "loss", Value: 0.5}}, Best: true})
	resp, err := http.Get(srv.URL + "/state")
	if err != nil {
		fmt.Println(err)
		return
	}
	defer resp.Body.Close()
	var s struct {
		Title  string
		Epochs []watch.Epoch
	}
	json.NewDecoder(resp.Body).Decode(&s)
	fmt.Println(s.Title, len(s.Epochs), s.Epochs[0].Train[0].Value)
	// Output: autoencoder on readings.csv 1 0.42
}
