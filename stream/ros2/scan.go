package ros2

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"

	"github.com/foxglove/mcap/go/mcap"
)

// Limits on what one MCAP record may hold, so a corrupt length cannot make
// the reader allocate without bound.
const (
	maxRecordBytes = 256 << 20 // one record, e.g. an uncompressed 4K image
	maxChunkBytes  = 512 << 20 // one decompressed chunk
)

// visitFunc receives each message with its channel and schema (schema may
// be nil for a channel without one). msg.Data is only valid during the call.
type visitFunc func(ch *mcap.Channel, schema *mcap.Schema, msg *mcap.Message) error

// scanMCAP reads every record of the MCAP file at path in file order,
// checking magic bytes, record lengths, chunk CRCs and that the file ends
// with a footer, and calls visit for each message. Any error is a
// [*RecordError] naming the record; visit's errors are wrapped the same way.
func scanMCAP(ctx context.Context, path string, visit visitFunc) error {
	return scanMCAPProgress(ctx, path, nil, visit)
}

// scanMCAPProgress is scanMCAP calling read(n) after each read of n bytes
// from the file (nil: no calls).
func scanMCAPProgress(ctx context.Context, path string, read func(n int), visit visitFunc) error {
	f, err := os.Open(path)
	if err != nil {
		return fmt.Errorf("ros2: %w", err)
	}
	defer f.Close()
	var r io.Reader = f
	if read != nil {
		r = &countingReader{r: f, read: read}
	}
	return scanReader(ctx, r, path, visit)
}

// countingReader reports every read's size.
type countingReader struct {
	r    io.Reader
	read func(n int)
}

func (c *countingReader) Read(p []byte) (int, error) {
	n, err := c.r.Read(p)
	c.read(n)
	return n, err
}

func scanReader(ctx context.Context, r io.Reader, path string, visit visitFunc) error {
	lex, err := mcap.NewLexer(r, &mcap.LexerOptions{
		ValidateChunkCRCs: true, MaxRecordSize: maxRecordBytes, MaxDecompressedChunkSize: maxChunkBytes,
	})
	if err != nil {
		return &RecordError{File: path, Record: "magic", Err: fmt.Errorf("%w: not an MCAP file (%v)", ErrMCAP, err)}
	}
	defer lex.Close()
	schemas := map[uint16]*mcap.Schema{}
	channels := map[uint16]*mcap.Channel{}
	var buf []byte
	sawFooter := false
	last := "none"
	for idx := 0; ; idx++ {
		if idx%256 == 0 {
			if err := ctx.Err(); err != nil {
				return fmt.Errorf("ros2: %s: stopped at record %d: %w", path, idx, err)
			}
		}
		tok, rec, err := nextRecord(lex, buf)
		if err != nil {
			if errors.Is(err, io.EOF) && sawFooter {
				return nil
			}
			var trunc *mcap.ErrTruncatedRecord
			switch {
			case errors.Is(err, io.EOF) && idx == 0:
				err = fmt.Errorf("%w: the file ends right after its magic bytes: it is truncated", ErrMCAP)
			case errors.Is(err, io.EOF):
				err = fmt.Errorf("%w: the file ends after record %d (%s) without a footer: it is truncated (was the recorder stopped before it closed the file?)", ErrMCAP, idx-1, last)
			case errors.As(err, &trunc):
				err = fmt.Errorf("%w: %v: the file is truncated", ErrMCAP, err)
			default:
				err = fmt.Errorf("%w: %v", ErrMCAP, err)
			}
			what := "the first record"
			if idx > 0 {
				what = "the record after a " + last + " record"
			}
			return &RecordError{File: path, Record: what, Index: idx, Err: err}
		}
		if cap(rec) > cap(buf) {
			buf = rec[:0]
		}
		last = tok.String()
		fail := func(topic string, err error) error {
			return &RecordError{File: path, Record: last, Index: idx, Topic: topic, Err: err}
		}
		if idx == 0 && tok != mcap.TokenHeader {
			return fail("", fmt.Errorf("%w: the first record is a %s record; the MCAP specification requires the header first", ErrMCAP, last))
		}
		switch tok {
		case mcap.TokenSchema:
			s, err := mcap.ParseSchema(rec)
			if err != nil {
				return fail("", fmt.Errorf("%w: %v", ErrMCAP, err))
			}
			s.Data = append([]byte(nil), s.Data...)
			schemas[s.ID] = s
		case mcap.TokenChannel:
			c, err := mcap.ParseChannel(rec)
			if err != nil {
				return fail("", fmt.Errorf("%w: %v", ErrMCAP, err))
			}
			if c.SchemaID != 0 && schemas[c.SchemaID] == nil {
				return fail(c.Topic, fmt.Errorf("%w: channel %d refers to schema %d, which was not declared before it", ErrMCAP, c.ID, c.SchemaID))
			}
			channels[c.ID] = c
		case mcap.TokenMessage:
			m, err := mcap.ParseMessage(rec)
			if err != nil {
				return fail("", fmt.Errorf("%w: %v", ErrMCAP, err))
			}
			ch := channels[m.ChannelID]
			if ch == nil {
				return fail("", fmt.Errorf("%w: message on channel %d, which was not declared before it", ErrMCAP, m.ChannelID))
			}
			if err := visit(ch, schemas[ch.SchemaID], m); err != nil {
				return fail(ch.Topic, err)
			}
		case mcap.TokenFooter:
			sawFooter = true
		}
	}
}

// TopicInfo describes one topic of an MCAP file.
type TopicInfo struct {
	Topic    string // e.g. "/camera/image_raw/compressed"
	Type     string // schema name, e.g. "sensor_msgs/msg/CompressedImage"; "" if none
	Encoding string // message encoding, e.g. "cdr"
	Messages int    // number of messages
	// FirstUs and LastUs are the first and last log times, microseconds.
	FirstUs, LastUs int64
}

// Supported reports whether the importer can read the topic's messages.
func (t TopicInfo) Supported() bool {
	if t.Encoding != "cdr" {
		return false
	}
	_, ok := msgDefs[t.Type]
	return ok && t.Type != ""
}

// ListTopics reads the whole MCAP file at path and returns its topics in
// order of first appearance. It fails like the importer on a corrupt or
// truncated file.
func ListTopics(ctx context.Context, path string) ([]TopicInfo, error) {
	return listTopics(ctx, path, nil)
}

func listTopics(ctx context.Context, path string, read func(int)) ([]TopicInfo, error) {
	var out []TopicInfo
	at := map[string]int{}
	err := scanMCAPProgress(ctx, path, read, func(ch *mcap.Channel, s *mcap.Schema, m *mcap.Message) error {
		i, ok := at[ch.Topic]
		if !ok {
			typ := ""
			if s != nil {
				typ = s.Name
			}
			i = len(out)
			at[ch.Topic] = i
			out = append(out, TopicInfo{Topic: ch.Topic, Type: typ, Encoding: ch.MessageEncoding, FirstUs: int64(m.LogTime / 1000)})
		}
		out[i].Messages++
		out[i].LastUs = int64(m.LogTime / 1000)
		return nil
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}

// nextRecord is lex.Next with a panic turned into an error: the MCAP
// library (v1.7.0, Lexer.Next -> loadChunk) slices its 32-byte buffer with
// a chunk's compression-name length unchecked, so a corrupt chunk header
// panics there (found by FuzzScanMCAP). A corrupt file must give an error.
func nextRecord(lex *mcap.Lexer, buf []byte) (tok mcap.TokenType, rec []byte, err error) {
	defer func() {
		if p := recover(); p != nil {
			tok, rec, err = mcap.TokenError, nil, fmt.Errorf("corrupt record header (%v)", p)
		}
	}()
	return lex.Next(buf)
}
