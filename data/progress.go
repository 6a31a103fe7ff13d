package data

import (
	"io"
	"os"
)

// Progress receives how far a load has come: done of total bytes read
// from the file (compressed bytes for a gzip file), or done of total
// images for a folder. It is called from the loading goroutine, at most
// about once a mebibyte or once an image, and once more at the end.
type Progress func(done, total int64)

// progressStep is how many bytes pass between two Progress calls.
const progressStep = 1 << 20

// countingReader reports the bytes read through it to a Progress.
type countingReader struct {
	r           io.Reader
	done, total int64
	next        int64
	report      Progress
}

func (c *countingReader) Read(p []byte) (int, error) {
	n, err := c.r.Read(p)
	c.done += int64(n)
	if c.done >= c.next || err == io.EOF {
		c.report(c.done, c.total)
		c.next = c.done + progressStep
	}
	return n, err
}

// withProgress wraps f so that reads from it are reported, when report
// is not nil.
func withProgress(f *os.File, report Progress) io.Reader {
	if report == nil {
		return f
	}
	total := int64(-1)
	if st, err := f.Stat(); err == nil && st.Mode().IsRegular() {
		total = st.Size()
	}
	return &countingReader{r: f, total: total, report: report}
}
