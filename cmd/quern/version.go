package main

import (
	"fmt"
	"runtime"
	"runtime/debug"

	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/internal/kernel/gemm"
)

// cmdVersion prints what a bug report needs: the module version, the Go
// toolchain, the build settings and the matrix kernel this CPU runs.
func cmdVersion(e *env, args []string) error {
	fs := newFlags(e, "version", "")
	if _, err := parse(e, fs, args, 0); err != nil {
		return err
	}
	for _, l := range versionLines() {
		fmt.Fprintf(e.stdout, "%-10s %s\n", l[0], l[1])
	}
	return nil
}

// version is the module's version as the build recorded it: a tag or
// pseudo-version for `go install ...@version`, "(devel)" in a checkout.
func version() string {
	if bi, ok := debug.ReadBuildInfo(); ok && bi.Main.Version != "" {
		return bi.Main.Version
	}
	return "(unknown)"
}

// versionLines lists label and value pairs for `quern version` and the
// report pages.
func versionLines() [][2]string {
	lines := [][2]string{{"quern", version()}, {"go", runtime.Version()}, {"platform", runtime.GOOS + "/" + runtime.GOARCH}}
	if bi, ok := debug.ReadBuildInfo(); ok {
		var rev, at, modified, tags, cgo, level string
		for _, s := range bi.Settings {
			switch s.Key {
			case "vcs.revision":
				rev = s.Value
			case "vcs.time":
				at = s.Value
			case "vcs.modified":
				if s.Value == "true" {
					modified = " (with uncommitted changes)"
				}
			case "-tags":
				tags = s.Value
			case "CGO_ENABLED":
				cgo = s.Value
			case "GOAMD64", "GOARM64":
				level = s.Key + "=" + s.Value
			}
		}
		if rev != "" {
			lines = append(lines, [2]string{"commit", rev + " " + at + modified})
		}
		build := "CGO_ENABLED=" + cgo
		if cgo == "" {
			build = "CGO_ENABLED unset"
		}
		if level != "" {
			build += " " + level
		}
		if tags != "" {
			build += " tags=" + tags
		}
		lines = append(lines, [2]string{"build", build})
	}
	lines = append(lines, [2]string{"kernel", kernelName()})
	lines = append(lines, [2]string{"threads", fmt.Sprintf("%d (GOMAXPROCS)", runtime.GOMAXPROCS(0))})
	return lines
}

// kernelName says which float32 matrix product runs on this CPU.
func kernelName() string {
	if engine.BLASName() != "quern-gemm" {
		return engine.BLASName() + " (cgo)"
	}
	switch {
	case gemm.UsingAVX512():
		return "quern gemm, AVX-512 assembly"
	case gemm.UsingAssembly() && runtime.GOARCH == "arm64":
		return "quern gemm, NEON assembly"
	case gemm.UsingAssembly():
		return "quern gemm, AVX2/FMA assembly"
	}
	return "quern gemm, portable Go (no assembly kernel for this CPU or build)"
}
