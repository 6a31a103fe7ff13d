package fleet_test

import (
	"fmt"
	"os"
	"path/filepath"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/fleet"
	"github.com/quernlab/quern/model"
	"github.com/quernlab/quern/modelfile"
)

// makeFleet writes, into dir, what quern train -group writes: a model
// file per group (here untrained autoencoders of three inputs, seeded as
// a fleet's members are), a shared model and the index naming them.
func makeFleet(dir string, groups []string, seed uint64) error {
	ix := fleet.Index{Format: fleet.FormatName, Version: fleet.Version, GroupColumn: "site", Kind: "ae", Seed: seed, MinRows: 10}
	put := func(name, group string) (fleet.Member, error) {
		m, err := ae.New(ae.Config{Inputs: 3, Hidden: []int{4}, Latent: 2, Seed: fleet.SeedFor(seed, group)})
		if err != nil {
			return fleet.Member{}, err
		}
		f, err := m.File(nil)
		if err != nil {
			return fleet.Member{}, err
		}
		path := filepath.Join(dir, name)
		if err := modelfile.Write(path, f); err != nil {
			return fleet.Member{}, err
		}
		b, err := os.ReadFile(path)
		return fleet.Member{Group: group, File: name, SHA256: fleet.Hash(b), Rows: 10}, err
	}
	for _, g := range groups {
		m, err := put(fleet.FileName(g), g)
		if err != nil {
			return err
		}
		ix.Members = append(ix.Members, m)
	}
	sh, err := put(fleet.SharedFile, "")
	if err != nil {
		return err
	}
	ix.Shared = &sh
	return fleet.WriteIndex(dir, &ix)
}

// A fleet is opened once and asked, row by row, for the model of the
// row's group; a group without a model of its own gets the shared one.
func ExampleOpen() {
	dir, _ := os.MkdirTemp("", "fleet")
	defer os.RemoveAll(dir)
	if err := makeFleet(dir, []string{"pump-1", "pump-2"}, 7); err != nil {
		fmt.Println(err)
		return
	}

	f, err := fleet.Open(dir)
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, group := range []string{"pump-2", "pump-9"} {
		e, shared, _ := f.Route(group)
		codes, _ := e.Value.(model.Encoder).Encode([]float32{0.5, 1, 1.5}, 1)
		fmt.Printf("%s: shared %v, a code of %d values\n", group, shared, len(codes))
	}
	// Output:
	// pump-2: shared false, a code of 2 values
	// pump-9: shared true, a code of 2 values
}

// Each group's seed depends on the run's seed and the group's name only,
// so any shard of an array job trains the same model for it.
func ExampleShard() {
	sh, _ := fleet.ParseShard("1/3")
	for k, g := range []string{"a", "b", "c", "d", "e"} {
		if sh.Owns(k) {
			fmt.Println(g, "is trained by shard", sh, "into", sh.PartFile())
		}
	}
	// Output:
	// b is trained by shard 1/3 into part-1-of-3.json
	// e is trained by shard 1/3 into part-1-of-3.json
}
