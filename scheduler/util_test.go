package scheduler

import (
	"bytes"
	"io"
)

type writerBuf []byte

func (w *writerBuf) Write(p []byte) (int, error) { *w = append(*w, p...); return len(p), nil }

func readerOf(b []byte) io.Reader { return bytes.NewReader(b) }
