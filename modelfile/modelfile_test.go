package modelfile

import (
	"bytes"
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/require"
)

func sample() *File {
	return &File{
		Kind: "ae",
		Meta: json.RawMessage(`{"inputs":3}`),
		Tensors: []Tensor{
			{Name: "encoder.0.weight", Rows: 3, Cols: 2, F32: []float32{1, 2, 3, 4, 5, 6}},
			{Name: "encoder.0.bias", Rows: 1, Cols: 2, F64: []float64{-1.5, 1e-300}},
		},
	}
}

func encode(t testing.TB, f *File) []byte {
	var b bytes.Buffer
	require.NoError(t, Encode(&b, f))
	return b.Bytes()
}

func TestRoundTrip(t *testing.T) {
	b := encode(t, sample())
	f, err := Decode(b, "x")
	require.NoError(t, err)
	want := sample()
	want.Version = 1 // the least version, written for 0
	require.Equal(t, want, f)
	tt, ok := f.Tensor("encoder.0.bias")
	require.True(t, ok)
	require.Equal(t, 1e-300, tt.F64[1])
}

func TestCorruptionIsDetected(t *testing.T) {
	good := encode(t, sample())
	for i := range good {
		b := append([]byte(nil), good...)
		b[i] ^= 0x40
		_, err := Decode(b, "x")
		require.Error(t, err, "flipping byte %d", i)
	}
	for n := 0; n < len(good); n++ {
		_, err := Decode(good[:n], "x")
		require.Error(t, err, "truncated to %d", n)
	}
	var ce *CorruptError
	_, err := Decode(good[:len(good)-1], "model.qm")
	require.True(t, errors.As(err, &ce))
	require.Contains(t, err.Error(), "model.qm")
}

// Files are written at the least version their content asks for, and
// read back with it; a version past this build's is refused both ways.
func TestVersionWritten(t *testing.T) {
	for _, v := range []uint16{0, 1, 2} {
		f := sample()
		f.Version = v
		var b bytes.Buffer
		require.NoError(t, Encode(&b, f))
		require.EqualValues(t, max(v, 1), b.Bytes()[8], "version %d", v)
		back, err := Decode(b.Bytes(), "x")
		require.NoError(t, err)
		require.Equal(t, max(v, 1), back.Version)
	}
	f := sample()
	f.Version = Version + 1
	require.Error(t, Encode(&bytes.Buffer{}, f))
}

func TestFutureVersionIsRefused(t *testing.T) {
	f := sample()
	var b bytes.Buffer
	require.NoError(t, Encode(&b, f))
	raw := b.Bytes()
	raw[8] = Version + 1
	// re-seal the checksum so that only the version is wrong
	body := raw[:len(raw)-32]
	sum := sha256Sum(body)
	copy(raw[len(raw)-32:], sum)
	_, err := Decode(raw, "x")
	require.ErrorIs(t, err, ErrVersion)
}

// A hostile header that declares a huge tensor inside a valid checksum is
// refused before any allocation of that size.
func TestHostileShapes(t *testing.T) {
	f := &File{Kind: "ae", Tensors: []Tensor{{Name: "w", Rows: 1, Cols: 1, F32: []float32{1}}}}
	raw := encode(t, f)
	// rows field of the only tensor: after magic(8) ver(2) kl(2) kind(2) ml(4) nt(4) nl(2) name(1)
	off := 8 + 2 + 2 + 2 + 4 + 4 + 2 + 1
	raw[off], raw[off+1], raw[off+2], raw[off+3] = 0xff, 0xff, 0xff, 0x7f
	copy(raw[len(raw)-32:], sha256Sum(raw[:len(raw)-32]))
	_, err := Decode(raw, "x")
	require.ErrorContains(t, err, "exceeds the file")
}

func TestAtomicWriteKeepsOldFileOnCrash(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "m.qm")
	require.NoError(t, Write(p, sample()))
	old, err := os.ReadFile(p)
	require.NoError(t, err)
	beforeRename = func(string) error { return errors.New("simulated crash") }
	defer func() { beforeRename = func(string) error { return nil } }()
	f2 := sample()
	f2.Kind = "vae"
	require.Error(t, Write(p, f2))
	now, err := os.ReadFile(p)
	require.NoError(t, err)
	require.Equal(t, old, now, "the previous file survives a failed save")
	entries, _ := os.ReadDir(dir)
	require.Len(t, entries, 1, "no temporary file is left behind")
	got, err := Read(p, 0)
	require.NoError(t, err)
	require.Equal(t, "ae", got.Kind)
	_, err = Read(p, 10)
	require.ErrorContains(t, err, "limit")
}

// Saving over a file keeps its permissions and a new file is 0644; a
// temporary file left by a crashed save goes at the next save once it is
// stale, and a fresh one (another writer's, under way) stays.
func TestWriteModesAndLeftovers(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "m[1].qm")
	require.NoError(t, Write(p, sample()))
	st, err := os.Stat(p)
	require.NoError(t, err)
	require.Equal(t, os.FileMode(0o644), st.Mode().Perm())
	require.NoError(t, os.Chmod(p, 0o640))
	require.NoError(t, Write(p, sample()))
	st, err = os.Stat(p)
	require.NoError(t, err)
	require.Equal(t, os.FileMode(0o640), st.Mode().Perm())

	stale := filepath.Join(dir, ".m[1].qm.tmp-123")
	fresh := filepath.Join(dir, ".m[1].qm.tmp-456")
	other := filepath.Join(dir, ".n.qm.tmp-789")
	for _, f := range []string{stale, fresh, other} {
		require.NoError(t, os.WriteFile(f, []byte("partial"), 0o600))
	}
	long := time.Now().Add(-2 * StaleAfter)
	require.NoError(t, os.Chtimes(stale, long, long))
	require.NoError(t, os.Chtimes(other, long, long))
	require.NoError(t, Write(p, sample()))
	_, err = os.Stat(stale)
	require.True(t, os.IsNotExist(err), "the stale leftover is removed")
	for _, f := range []string{fresh, other} {
		_, err = os.Stat(f)
		require.NoError(t, err, "%s is kept", f)
	}
}

// FuzzDecode feeds arbitrary bytes to the decoder: it must return a file or
// an error, never panic, and a decoded file must re-encode to the input.
func FuzzDecode(f *testing.F) {
	f.Add(encode(f, sample()))
	f.Add([]byte("QUERNMDL"))
	f.Add([]byte{})
	f.Fuzz(func(t *testing.T, b []byte) {
		file, err := Decode(b, "fuzz")
		if err != nil {
			return
		}
		var out bytes.Buffer
		if err := Encode(&out, file); err != nil {
			t.Fatalf("decoded file does not re-encode: %v", err)
		}
		if !bytes.Equal(out.Bytes(), b) {
			t.Fatalf("round trip changed the bytes")
		}
	})
}

// WriteUnsynced writes the same bytes as Write; Sync then syncs many
// files at once and names a missing one.
func TestWriteUnsyncedThenSync(t *testing.T) {
	dir := t.TempDir()
	f := &File{Kind: "ae", Tensors: []Tensor{{Name: "w", Rows: 1, Cols: 2, F32: []float32{1, 2}}}}
	a, b := filepath.Join(dir, "a.qm"), filepath.Join(dir, "b.qm")
	require.NoError(t, Write(a, f))
	require.NoError(t, WriteUnsynced(b, f))
	ba, err := os.ReadFile(a)
	require.NoError(t, err)
	bb, err := os.ReadFile(b)
	require.NoError(t, err)
	require.Equal(t, ba, bb)
	require.NoError(t, Sync(a, b))
	require.Error(t, Sync(a, filepath.Join(dir, "missing.qm")))
}
