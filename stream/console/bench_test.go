package console

import (
	"testing"
	"time"
)

// nullSink accepts everything.
type nullSink struct{}

func (nullSink) sendVideo(*sharedBuf, int64, int64) error { return nil }
func (nullSink) sendMeta([]byte) error                    { return nil }

// BenchmarkWriteFrame measures the caller's cost of fanning one 8 KB frame
// out to viewers (the queues are drained by the viewers' goroutines).
func BenchmarkWriteFrame(b *testing.B) {
	for _, n := range []int{0, 1, 4} {
		b.Run(map[int]string{0: "viewers=0", 1: "viewers=1", 4: "viewers=4"}[n], func(b *testing.B) {
			e := newEgress(time.Now, time.Second, nil)
			for i := 0; i < n; i++ {
				e.add(newViewer(uint64(i), nullSink{}, 1024, 1024))
			}
			frame := make([]byte, 8192)
			copy(frame, keyFrame)
			b.ReportAllocs()
			b.SetBytes(int64(len(frame)))
			for b.Loop() {
				if err := e.writeFrame(frame, tick); err != nil {
					b.Fatal(err)
				}
			}
			b.StopTimer()
			e.close()
		})
	}
}

// BenchmarkWriteMeta measures encoding and fanning out one meta message.
func BenchmarkWriteMeta(b *testing.B) {
	e := newEgress(time.Now, time.Second, nil)
	for i := 0; i < 2; i++ {
		e.add(newViewer(uint64(i), nullSink{}, 1024, 1024))
	}
	m := sampleMeta()
	b.ReportAllocs()
	for b.Loop() {
		m.Seq++
		if err := e.writeMeta(&m); err != nil {
			b.Fatal(err)
		}
	}
	b.StopTimer()
	e.close()
}
