package model_test

import (
	"bytes"
	"crypto/sha256"
	"runtime"
	"testing"

	"github.com/quernlab/quern/internal/testenv"
	"github.com/quernlab/quern/model"
	"github.com/quernlab/quern/modelfile"
	"github.com/stretchr/testify/require"
)

// lie rewrites the config section of a compat model file with the given
// fields and returns the whole file, sealed again.
func lie(t testing.TB, name string, fields map[string]any) []byte {
	t.Helper()
	f := testenv.Compat(t, name)
	var cfg map[string]any
	_, err := f.Section("config", &cfg)
	require.NoError(t, err)
	for k, v := range fields {
		cfg[k] = v
	}
	require.NoError(t, f.SetSection("config", cfg))
	var b bytes.Buffer
	require.NoError(t, modelfile.Encode(&b, f))
	return b.Bytes()
}

// lieSection replaces a whole metadata section of a compat model file and
// returns the file, sealed again.
func lieSection(t testing.TB, name, key string, v any) []byte {
	t.Helper()
	f := testenv.Compat(t, name)
	require.NoError(t, f.SetSection(key, v))
	var b bytes.Buffer
	require.NoError(t, modelfile.Encode(&b, f))
	return b.Bytes()
}

func many(n, width int) []int {
	s := make([]int, n)
	for i := range s {
		s[i] = width
	}
	return s
}

// hostileFiles are model files whose sealed metadata lies about what they
// hold: the attacks of a file that passes every check of the format.
func hostileFiles(t testing.TB) map[string][]byte {
	return map[string][]byte{
		"huge latent":          lie(t, "ae-plain.qm", map[string]any{"Latent": 1 << 40}),
		"huge input width":     lie(t, "ae-plain.qm", map[string]any{"Inputs": 1 << 40}),
		"huge hidden width":    lie(t, "vae-gaussian.qm", map[string]any{"Hidden": []int{1 << 40}}),
		"huge class count":     lie(t, "ae-kinds.qm", map[string]any{"Classes": 1 << 40}),
		"100000 hidden layers": lie(t, "ae-plain.qm", map[string]any{"Hidden": many(100000, 1<<20)}),
		"4M hidden widths":     lie(t, "ae-plain.qm", map[string]any{"Hidden": many(4_000_000, 1)}),
		"huge noise width":     lie(t, "gan-bce.qm", map[string]any{"Noise": 1 << 40}),
		"huge pack":            lie(t, "gan-bce.qm", map[string]any{"Pack": 1 << 40}),
		"negative width":       lie(t, "gan-f64.qm", map[string]any{"GenHidden": []int{-8}}),
		"wrong precision":      lie(t, "ae-f64.qm", map[string]any{"Precision": "float32"}),
		"image shape":          lieSection(t, "vae-bernoulli.qm", "image", []int{1 << 30, 1 << 30, 1 << 30}),
		"negative image shape": lieSection(t, "vae-bernoulli.qm", "image", []int{-28, -28, 1}),
		"column names":         lieSection(t, "ae-plain.qm", "columns", []string{"a", "b"}),
	}
}

// A file whose settings promise more than it holds is refused with a
// one-line error, and loading it allocates at most a small multiple of
// the file's own size (plus a fixed allowance): nothing is built from the
// settings before they are checked against the tensors.
func TestHostileFilesAreRefusedCheaply(t *testing.T) {
	for name, b := range hostileFiles(t) {
		t.Run(name, func(t *testing.T) {
			var before, after runtime.MemStats
			runtime.GC()
			runtime.ReadMemStats(&before)
			f, err := modelfile.Decode(b, name)
			if err == nil {
				_, err = model.FromFile(f)
			}
			runtime.ReadMemStats(&after)
			require.Error(t, err)
			require.NotContains(t, err.Error(), "\n")
			allocated := after.TotalAlloc - before.TotalAlloc
			// a bound of our own, no source: linear in the file, 32
			// bytes per byte of it and 1 MiB. The worst case is a long
			// list of one-digit widths: two bytes of JSON become an
			// eight-byte int, and encoding/json grows the slice by a
			// quarter at a time (about five times its final size in
			// all); 4M widths cost 25 bytes per byte of file.
			require.LessOrEqual(t, allocated, uint64(32*len(b)+1<<20), "%d bytes allocated for a %d-byte file", allocated, len(b))
		})
	}
}

// reseal replaces the checksum at the end of b with the SHA-256 of the
// rest, so that a mutation of the metadata or the tensors reaches the
// loaders instead of stopping at the seal.
func reseal(b []byte) []byte {
	if len(b) < 32 {
		return b
	}
	body := b[:len(b)-32]
	sum := sha256.Sum256(body)
	return append(append([]byte(nil), body...), sum[:]...)
}

// FuzzOpen mutates whole model files, reseals them and opens them: no
// input may panic, hang or allocate far beyond its size. The seeds are
// model files of the three kinds and the hostile files above (made from
// them).
func FuzzOpen(f *testing.F) {
	for _, name := range []string{"ae-plain.qm", "vae-f64.qm", "gan-f64.qm"} {
		f.Add(rawCompat(f, name))
	}
	for _, b := range hostileFiles(f) {
		f.Add(b)
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		if len(b) > 1<<20 {
			return
		}
		file, err := modelfile.Decode(reseal(b), "fuzz")
		if err != nil {
			return
		}
		m, err := model.FromFile(file)
		if err != nil {
			return
		}
		// an accepted file gives a model that answers
		if s, ok := m.(model.Sampler); ok {
			_, _ = s.Sample(2, 1)
		}
	})
}

func rawCompat(t testing.TB, name string) []byte {
	var b bytes.Buffer
	require.NoError(t, modelfile.Encode(&b, testenv.Compat(t, name)))
	return b.Bytes()
}
