// Command fleetmem opens a fleet the way quern serve does (fleet.Open)
// and prints the Go heap it holds after a collection, in all and per
// model (the shared model counted); -heapprofile writes a heap profile
// for `go tool pprof` to say what the bytes are.
//
//	go run ./bench/fleetmem FLEET
package main

import (
	"flag"
	"fmt"
	"os"
	"runtime"
	"runtime/pprof"

	"github.com/quernlab/quern/fleet"
)

func main() {
	prof := flag.String("heapprofile", "", "write a heap profile to this file")
	flag.Parse()
	if flag.NArg() != 1 {
		fmt.Fprintln(os.Stderr, "usage: fleetmem [-heapprofile FILE] FLEET")
		os.Exit(2)
	}
	var before, after runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&before)
	f, err := fleet.Open(flag.Arg(0))
	if err != nil {
		fmt.Fprintln(os.Stderr, "fleetmem:", err)
		os.Exit(1)
	}
	runtime.GC()
	runtime.ReadMemStats(&after)
	n := f.Len()
	if f.Shared() != nil {
		n++
	}
	held := float64(after.HeapInuse - before.HeapInuse)
	fmt.Printf("models %d heap-mb %.1f per-model-kb %.1f\n", n, held/1e6, held/1e3/float64(n))
	if *prof != "" {
		pf, err := os.Create(*prof)
		if err == nil {
			err = pprof.WriteHeapProfile(pf)
			pf.Close()
		}
		if err != nil {
			fmt.Fprintln(os.Stderr, "fleetmem:", err)
			os.Exit(1)
		}
	}
	runtime.KeepAlive(f)
}
