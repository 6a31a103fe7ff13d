package demo_test

import (
	"context"
	"fmt"
	"os"
	"strings"

	"github.com/quernlab/quern/demo"
)

func ExampleRun() {
	dir, _ := os.MkdirTemp("", "demo")
	defer os.RemoveAll(dir)
	var said []string
	err := demo.Run(context.Background(), demo.Config{Out: dir, Short: true, Seed: 1, Say: func(s string) { said = append(said, s) }})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(strings.HasPrefix(said[0], "Invented fleet: 12 pumps"))
	_, err = os.Stat(dir + "/pumps.qm")
	fmt.Println(err == nil)
	// Output:
	// true
	// true
}
