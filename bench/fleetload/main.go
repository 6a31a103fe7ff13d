// Command fleetload times single-record score requests against a running
// quern serve: it reads records from a CSV file with a header (the first
// -records rows), sends them one per request, round and round, from
// -clients connections kept alive, and prints the latency quantiles and
// the throughput, and, given -pid, the server's resident memory (VmRSS
// and its peak VmHWM from /proc).
//
//	go run ./bench/fleetload -url http://127.0.0.1:8417 -data fleet.csv -pid 1234
package main

import (
	"bufio"
	"bytes"
	"encoding/csv"
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"net/http"
	"os"
	"slices"
	"strconv"
	"strings"
	"sync"
	"time"
)

func main() {
	url := flag.String("url", "http://127.0.0.1:8417", "the server")
	path := flag.String("data", "", "CSV file of records (header row)")
	records := flag.Int("records", 20000, "records read from the file")
	requests := flag.Int("requests", 20000, "requests timed")
	warm := flag.Int("warm", 2000, "requests sent first, not timed")
	clients := flag.Int("clients", 4, "concurrent connections")
	pid := flag.Int("pid", 0, "the server's process, for its memory")
	flag.Parse()
	bodies, err := readBodies(*path, *records)
	if err != nil {
		fmt.Fprintln(os.Stderr, "fleetload:", err)
		os.Exit(1)
	}
	c := &http.Client{Transport: &http.Transport{MaxIdleConnsPerHost: *clients}, Timeout: 10 * time.Second}
	run := func(n int, lat []time.Duration) error {
		var wg sync.WaitGroup
		errs := make(chan error, *clients)
		for k := range *clients {
			wg.Add(1)
			go func() {
				defer wg.Done()
				for i := k; i < n; i += *clients {
					t := time.Now()
					resp, err := c.Post(*url+"/v1/score", "application/json", bytes.NewReader(bodies[i%len(bodies)]))
					if err != nil {
						errs <- err
						return
					}
					b, _ := io.ReadAll(resp.Body)
					resp.Body.Close()
					if resp.StatusCode != 200 {
						errs <- fmt.Errorf("status %d: %s", resp.StatusCode, b)
						return
					}
					if lat != nil {
						lat[i] = time.Since(t)
					}
				}
			}()
		}
		wg.Wait()
		close(errs)
		return <-errs
	}
	if err := run(*warm, nil); err != nil {
		fmt.Fprintln(os.Stderr, "fleetload:", err)
		os.Exit(1)
	}
	lat := make([]time.Duration, *requests)
	start := time.Now()
	if err := run(*requests, lat); err != nil {
		fmt.Fprintln(os.Stderr, "fleetload:", err)
		os.Exit(1)
	}
	wall := time.Since(start)
	slices.Sort(lat)
	q := func(p float64) float64 { return float64(lat[int(p*float64(len(lat)-1))].Microseconds()) }
	fmt.Printf("requests %d clients %d p50-us %.0f p90-us %.0f p99-us %.0f max-us %.0f req/s %.0f\n", *requests, *clients, q(0.5), q(0.9), q(0.99), q(1), float64(*requests)/wall.Seconds())
	if *pid > 0 {
		rss, hwm := memory(*pid)
		fmt.Printf("rss-kb %d peak-rss-kb %d\n", rss, hwm)
	}
}

// readBodies turns the file's first n rows into single-record bodies.
func readBodies(path string, n int) ([][]byte, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	r := csv.NewReader(bufio.NewReader(f))
	head, err := r.Read()
	if err != nil {
		return nil, err
	}
	var out [][]byte
	for len(out) < n {
		row, err := r.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			return nil, err
		}
		rec := map[string]any{}
		for j, name := range head {
			if v, err := strconv.ParseFloat(row[j], 64); err == nil {
				rec[name] = v
			} else {
				rec[name] = row[j]
			}
		}
		b, _ := json.Marshal(map[string]any{"records": []any{rec}})
		out = append(out, b)
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("%s: no records", path)
	}
	return out, nil
}

// memory reads a process's VmRSS and VmHWM, in KB.
func memory(pid int) (rss, hwm int) {
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/status", pid))
	if err != nil {
		return 0, 0
	}
	for _, line := range strings.Split(string(b), "\n") {
		f := strings.Fields(line)
		if len(f) >= 2 && f[0] == "VmRSS:" {
			rss, _ = strconv.Atoi(f[1])
		}
		if len(f) >= 2 && f[0] == "VmHWM:" {
			hwm, _ = strconv.Atoi(f[1])
		}
	}
	return rss, hwm
}
