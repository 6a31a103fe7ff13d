package data

import (
	"bufio"
	"fmt"
	"github.com/klauspost/compress/gzip"
	"io"
	"os"
	"path/filepath"
	"strings"
)

// Format is a kind of input file.
type Format string

const (
	FormatCSV    Format = "csv"
	FormatIDX    Format = "idx"
	FormatImages Format = "png-folder"
)

// Detect tells the format of path by its content, not its name: a
// directory is a folder of PNG images; a file that starts and ends with
// PAR1 is Parquet; a file whose (decompressed) first bytes are an idx header (two
// zero bytes, a known type, 1 to 4 dimensions) is idx; anything else is
// read as CSV.
func Detect(path string) (Format, error) {
	st, err := os.Stat(path)
	if err != nil {
		return "", fmt.Errorf("data: %w", err)
	}
	if st.IsDir() {
		return FormatImages, nil
	}
	f, err := os.Open(path)
	if err != nil {
		return "", fmt.Errorf("data: %w", err)
	}
	defer f.Close()
	br := bufio.NewReader(f)
	if h, _ := br.Peek(4); string(h) == parquetMagic && isParquet(path) {
		return FormatParquet, nil
	}
	var r io.Reader = br
	if h, _ := br.Peek(2); len(h) == 2 && h[0] == 0x1f && h[1] == 0x8b {
		zr, err := gzip.NewReader(br)
		if err != nil {
			return "", &ParseError{File: path, Msg: "bad gzip stream: " + err.Error()}
		}
		defer zr.Close()
		r = zr
	}
	var head [4]byte
	n, _ := io.ReadFull(r, head[:])
	if n == 4 && head[0] == 0 && head[1] == 0 && head[3] >= 1 && head[3] <= 4 {
		if _, ok := idxSizes[head[2]]; ok {
			return FormatIDX, nil
		}
	}
	return FormatCSV, nil
}

// LoadConfig gathers the per-format settings of Load.
type LoadConfig struct {
	CSV    CSVConfig
	IDX    IDXConfig
	Images ImageConfig
	// Limits, when not zero, replaces the Limits of every format's
	// settings: one set of caps whatever the file turns out to be.
	Limits Limits
	// Progress, when not nil, replaces the Progress of every format's
	// settings.
	Progress Progress
}

// Load reads path in whichever format Detect finds.
func Load(path string, cfg LoadConfig) (*Dataset, Format, error) {
	f, err := Detect(path)
	if err != nil {
		return nil, "", err
	}
	if cfg.Limits != (Limits{}) {
		cfg.CSV.Limits, cfg.IDX.Limits, cfg.Images.Limits = cfg.Limits, cfg.Limits, cfg.Limits
	}
	if cfg.Progress != nil {
		cfg.CSV.Progress, cfg.IDX.Progress, cfg.Images.Progress = cfg.Progress, cfg.Progress, cfg.Progress
	}
	var d *Dataset
	if f == FormatCSV && looksLikeIDX(path) && binaryStart(path) {
		// binary content named like an idx file but without its header:
		// report the idx problem rather than a confusing CSV one
		f = FormatIDX
	}
	switch f {
	case FormatImages:
		d, _, err = LoadImages(path, cfg.Images)
	case FormatIDX:
		d, err = LoadIDX(path, cfg.IDX)
	case FormatParquet:
		d, err = LoadParquet(path, cfg.CSV)
	default:
		d, err = LoadCSV(path, cfg.CSV)
	}
	return d, f, err
}

// looksLikeIDX reports whether a file name suggests the idx format.
func looksLikeIDX(path string) bool {
	base := strings.ToLower(filepath.Base(path))
	base = strings.TrimSuffix(base, ".gz")
	return strings.HasSuffix(base, ".idx") || strings.Contains(base, "-ubyte") || strings.Contains(base, "idx1") || strings.Contains(base, "idx3")
}

// binaryStart reports whether the first (decompressed) bytes of path hold
// control bytes that text never has.
func binaryStart(path string) bool {
	f, err := os.Open(path)
	if err != nil {
		return false
	}
	defer f.Close()
	br := bufio.NewReader(f)
	var r io.Reader = br
	if h, _ := br.Peek(2); len(h) == 2 && h[0] == 0x1f && h[1] == 0x8b {
		zr, err := gzip.NewReader(br)
		if err != nil {
			return false
		}
		defer zr.Close()
		r = zr
	}
	buf := make([]byte, 64)
	n, _ := io.ReadFull(r, buf)
	for _, c := range buf[:n] {
		if c < 0x09 || (c > 0x0d && c < 0x20) {
			return true
		}
	}
	return false
}
