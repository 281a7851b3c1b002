package calib

import (
	"bytes"
	"encoding/xml"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"

	"go.yaml.in/yaml/v3"

	"stopgap/internal/camera"
)

// Format is the layout a calibration file was read from.
type Format int

// Formats. The zero value is invalid.
const (
	FormatInvalid    Format = iota
	FormatOpenCVYAML        // OpenCV FileStorage, YAML
	FormatOpenCVXML         // OpenCV FileStorage, XML
	FormatROSYAML           // ROS camera_info YAML
)

// String returns the format's name.
func (f Format) String() string {
	switch f {
	case FormatOpenCVYAML:
		return "OpenCV YAML"
	case FormatOpenCVXML:
		return "OpenCV XML"
	case FormatROSYAML:
		return "ROS camera_info YAML"
	}
	return "invalid"
}

// maxFileBytes bounds what ReadFile reads: calibration files are a few KB.
const maxFileBytes = 16 << 20

// maxElems bounds the elements of one matrix (a calibration file's
// per-view extrinsics can hold thousands; ours need 9 and up to 14).
const maxElems = 1 << 20

// ReadFile reads the calibration file at path (see Parse).
func ReadFile(path string) (camera.Camera, Format, error) {
	f, err := os.Open(path)
	if err != nil {
		return camera.Camera{}, FormatInvalid, fmt.Errorf("calib: %w", err)
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, maxFileBytes+1))
	if err != nil {
		return camera.Camera{}, FormatInvalid, fmt.Errorf("calib: %w", err)
	}
	if len(data) > maxFileBytes {
		return camera.Camera{}, FormatInvalid, &ParseError{File: path, Err: fmt.Errorf("%w: larger than %d bytes", ErrFormat, maxFileBytes)}
	}
	return Parse(path, data)
}

// Parse reads a camera from the content of a calibration file named file
// (the name only labels errors). The layout is told from the content: XML
// is OpenCV's; YAML is OpenCV's if it starts with the "%YAML:1.0" line or
// its camera_matrix is an "!!opencv-matrix" node, ROS's otherwise. The
// camera has a zero mount. Errors are [*ParseError] values naming the line
// and key, wrapping [ErrFormat], [ErrMissing] or [ErrValue].
func Parse(file string, data []byte) (camera.Camera, Format, error) {
	trimmed := bytes.TrimSpace(bytes.TrimPrefix(data, []byte{0xEF, 0xBB, 0xBF}))
	if len(trimmed) == 0 {
		return camera.Camera{}, FormatInvalid, &ParseError{File: file, Err: fmt.Errorf("%w: the file is empty", ErrFormat)}
	}
	if trimmed[0] == '<' {
		cam, err := parseXML(file, data)
		return cam, FormatOpenCVXML, err
	}
	return parseYAML(file, data)
}

// fields is what both layouts provide, with the line of each entry.
type fields struct {
	width, height         int
	widthLine, heightLine int
	haveW, haveH          bool
	k                     []float64
	kLine                 int
	d                     []float64
	dLine                 int
	haveD                 bool
	model                 string
}

func (f *fields) camera(file string, format Format) (camera.Camera, error) {
	if !f.haveW || !f.haveH {
		return camera.Camera{}, &ParseError{File: file, Key: "image_width, image_height", Err: fmt.Errorf("%w: the image size is not in the file; add image_width and image_height (pixels) as the calibration tool wrote them", ErrMissing)}
	}
	if f.k == nil {
		return camera.Camera{}, &ParseError{File: file, Key: "camera_matrix", Err: fmt.Errorf("%w: no camera_matrix; is this a camera calibration file?", ErrMissing)}
	}
	if len(f.k) != 9 {
		return camera.Camera{}, &ParseError{File: file, Line: f.kLine, Key: "camera_matrix", Err: fmt.Errorf("%w: %d elements, want a 3x3 matrix", ErrValue, len(f.k))}
	}
	if !f.haveD {
		return camera.Camera{}, &ParseError{File: file, Key: "distortion_coefficients", Err: fmt.Errorf("%w: no distortion_coefficients; write zeros if the lens has no distortion", ErrMissing)}
	}
	model := f.model
	if format != FormatROSYAML {
		model = "plumb_bob" // OpenCV's coefficient order
	}
	if f.width <= 0 || f.width > camera.MaxImageSide {
		return camera.Camera{}, &ParseError{File: file, Line: f.widthLine, Key: "image_width", Err: fmt.Errorf("%w: %d pixels; want 1..%d", ErrValue, f.width, camera.MaxImageSide)}
	}
	if f.height <= 0 || f.height > camera.MaxImageSide {
		return camera.Camera{}, &ParseError{File: file, Line: f.heightLine, Key: "image_height", Err: fmt.Errorf("%w: %d pixels; want 1..%d", ErrValue, f.height, camera.MaxImageSide)}
	}
	cam, key, err := FromKD(f.width, f.height, [9]float64(f.k), model, f.d)
	if err != nil {
		line := f.kLine
		if key == "distortion_coefficients" {
			line = f.dLine
		}
		return camera.Camera{}, &ParseError{File: file, Line: line, Key: key, Err: err}
	}
	return cam, nil
}

// parseYAML reads either YAML layout.
func parseYAML(file string, data []byte) (camera.Camera, Format, error) {
	format := FormatROSYAML
	// OpenCV writes a "%YAML:1.0" directive that YAML 1.1/1.2 parsers do
	// not accept (the colon); blank it out, keeping line numbers.
	if bytes.HasPrefix(data, []byte("%YAML:")) {
		format = FormatOpenCVYAML
		end := bytes.IndexByte(data, '\n')
		if end < 0 {
			end = len(data)
		}
		data = append(bytes.Repeat([]byte{' '}, end), data[end:]...)
	}
	var doc yaml.Node
	if err := yaml.Unmarshal(data, &doc); err != nil {
		return camera.Camera{}, format, &ParseError{File: file, Err: fmt.Errorf("%w: %v", ErrFormat, err)}
	}
	if doc.Kind != yaml.DocumentNode || len(doc.Content) != 1 || doc.Content[0].Kind != yaml.MappingNode {
		return camera.Camera{}, format, &ParseError{File: file, Err: fmt.Errorf("%w: the top level is not a mapping of keys such as camera_matrix", ErrFormat)}
	}
	top := doc.Content[0]
	var f fields
	for i := 0; i+1 < len(top.Content); i += 2 {
		key, val := top.Content[i].Value, top.Content[i+1]
		var err error
		switch key {
		case "image_width":
			f.width, err = yamlInt(val)
			f.widthLine, f.haveW = val.Line, true
		case "image_height":
			f.height, err = yamlInt(val)
			f.heightLine, f.haveH = val.Line, true
		case "camera_matrix":
			if val.Tag == "!!opencv-matrix" {
				format = FormatOpenCVYAML
			}
			f.k, err = yamlMatrix(val, format)
			f.kLine = val.Line
		case "distortion_coefficients":
			f.d, err = yamlMatrix(val, format)
			f.dLine, f.haveD = val.Line, true
		case "distortion_model":
			if val.Kind != yaml.ScalarNode {
				err = fmt.Errorf("%w: want a name such as plumb_bob", ErrValue)
			}
			f.model = val.Value
		}
		if err != nil {
			var pe *ParseError
			if errors.As(err, &pe) {
				pe.File, pe.Key = file, key+pe.Key
				return camera.Camera{}, format, pe
			}
			return camera.Camera{}, format, &ParseError{File: file, Line: val.Line, Key: key, Err: err}
		}
	}
	cam, err := f.camera(file, format)
	return cam, format, err
}

func yamlInt(n *yaml.Node) (int, error) {
	if n.Kind != yaml.ScalarNode {
		return 0, fmt.Errorf("%w: want an integer", ErrValue)
	}
	v, err := strconv.Atoi(n.Value)
	if err != nil {
		return 0, fmt.Errorf("%w: %q is not an integer", ErrValue, n.Value)
	}
	return v, nil
}

// yamlMatrix reads {rows, cols, [dt,] data} (dt required by OpenCV's
// layout) and checks len(data) == rows*cols.
func yamlMatrix(n *yaml.Node, format Format) ([]float64, error) {
	if n.Kind != yaml.MappingNode {
		return nil, fmt.Errorf("%w: want a matrix with rows, cols and data", ErrValue)
	}
	rows, cols := -1, -1
	var data *yaml.Node
	dt := ""
	for i := 0; i+1 < len(n.Content); i += 2 {
		k, v := n.Content[i].Value, n.Content[i+1]
		var err error
		switch k {
		case "rows":
			rows, err = yamlInt(v)
		case "cols":
			cols, err = yamlInt(v)
		case "dt":
			dt = v.Value
		case "data":
			data = v
		}
		if err != nil {
			return nil, &ParseError{Line: v.Line, Key: "." + k, Err: err}
		}
	}
	if data == nil || rows < 0 || cols < 0 {
		return nil, &ParseError{Line: n.Line, Err: fmt.Errorf("%w: a matrix needs rows, cols and data", ErrMissing)}
	}
	if format == FormatOpenCVYAML && dt != "d" && dt != "f" {
		return nil, &ParseError{Line: n.Line, Key: ".dt", Err: fmt.Errorf("%w: element type %q; want d (double) or f (float)", ErrValue, dt)}
	}
	if data.Kind != yaml.SequenceNode {
		return nil, &ParseError{Line: data.Line, Key: ".data", Err: fmt.Errorf("%w: want a list of numbers", ErrValue)}
	}
	if rows*cols != len(data.Content) || rows > maxElems || cols > maxElems {
		return nil, &ParseError{Line: data.Line, Key: ".data", Err: fmt.Errorf("%w: %d numbers for a %dx%d matrix", ErrValue, len(data.Content), rows, cols)}
	}
	out := make([]float64, len(data.Content))
	for i, e := range data.Content {
		v, err := parseNumber(e.Value)
		if err != nil || e.Kind != yaml.ScalarNode {
			return nil, &ParseError{Line: e.Line, Key: fmt.Sprintf(".data[%d]", i), Err: err}
		}
		out[i] = v
	}
	return out, nil
}

// parseNumber parses a finite decimal number as OpenCV and ROS write them
// ("0.", "5.35e+02", "-1").
func parseNumber(s string) (float64, error) {
	v, err := strconv.ParseFloat(strings.TrimSpace(s), 64)
	if err != nil {
		return 0, fmt.Errorf("%w: %q is not a number", ErrValue, s)
	}
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, fmt.Errorf("%w: %q is not a finite number", ErrValue, s)
	}
	return v, nil
}

// parseXML reads OpenCV's XML FileStorage: <opencv_storage> holding
// <image_width>, <image_height> and matrices <name type_id="opencv-matrix">
// with <rows>, <cols>, <dt> and whitespace-separated <data>.
func parseXML(file string, data []byte) (camera.Camera, error) {
	dec := xml.NewDecoder(bytes.NewReader(data))
	var f fields
	depth := 0
	var path []string // element names from the root
	var text strings.Builder
	var mat struct {
		rows, cols, line int
		dt, data         string
	}
	line := func() int { l, _ := dec.InputPos(); return l }
	perr := func(key string, err error) error { return &ParseError{File: file, Line: line(), Key: key, Err: err} }
	sawRoot := false
	for {
		tok, err := dec.Token()
		if err == io.EOF {
			break
		}
		if err != nil {
			return camera.Camera{}, perr("", fmt.Errorf("%w: %v", ErrFormat, err))
		}
		switch t := tok.(type) {
		case xml.StartElement:
			depth++
			path = append(path, t.Name.Local)
			text.Reset()
			if depth == 1 {
				if t.Name.Local != "opencv_storage" {
					return camera.Camera{}, perr(t.Name.Local, fmt.Errorf("%w: the root element is <%s>, want <opencv_storage>", ErrFormat, t.Name.Local))
				}
				sawRoot = true
			}
			if depth == 2 {
				mat.rows, mat.cols, mat.dt, mat.data, mat.line = -1, -1, "", "", line()
			}
			if depth > 3 {
				return camera.Camera{}, perr(strings.Join(path[1:], "."), fmt.Errorf("%w: nested deeper than an opencv-matrix", ErrFormat))
			}
		case xml.CharData:
			if text.Len()+len(t) > maxFileBytes {
				return camera.Camera{}, perr("", fmt.Errorf("%w: text too long", ErrFormat))
			}
			text.Write(t)
		case xml.EndElement:
			key := strings.Join(path[1:], ".")
			s := strings.TrimSpace(text.String())
			var err error
			switch {
			case depth == 2 && (key == "image_width" || key == "image_height"):
				var v int
				if v, err = strconv.Atoi(s); err != nil {
					err = fmt.Errorf("%w: %q is not an integer", ErrValue, s)
				} else if key == "image_width" {
					f.width, f.haveW, f.widthLine = v, true, line()
				} else {
					f.height, f.haveH, f.heightLine = v, true, line()
				}
			case depth == 3 && (path[1] == "camera_matrix" || path[1] == "distortion_coefficients"):
				switch path[2] {
				case "rows":
					mat.rows, err = strconv.Atoi(s)
				case "cols":
					mat.cols, err = strconv.Atoi(s)
				case "dt":
					mat.dt = s
				case "data":
					mat.data = s
				}
				if err != nil {
					err = fmt.Errorf("%w: %q is not an integer", ErrValue, s)
				}
			case depth == 2 && (key == "camera_matrix" || key == "distortion_coefficients"):
				var v []float64
				if v, err = xmlMatrix(mat.rows, mat.cols, mat.dt, mat.data); err == nil {
					if key == "camera_matrix" {
						f.k, f.kLine = v, mat.line
					} else {
						f.d, f.dLine, f.haveD = v, mat.line, true
					}
				}
			}
			if err != nil {
				return camera.Camera{}, perr(key, err)
			}
			depth--
			path = path[:len(path)-1]
			text.Reset()
		}
	}
	if !sawRoot {
		return camera.Camera{}, &ParseError{File: file, Err: fmt.Errorf("%w: no <opencv_storage> element", ErrFormat)}
	}
	return f.camera(file, FormatOpenCVXML)
}

func xmlMatrix(rows, cols int, dt, data string) ([]float64, error) {
	if rows < 0 || cols < 0 || data == "" && rows*cols > 0 {
		return nil, fmt.Errorf("%w: a matrix needs rows, cols and data", ErrMissing)
	}
	if dt != "d" && dt != "f" {
		return nil, fmt.Errorf("%w: element type %q; want d (double) or f (float)", ErrValue, dt)
	}
	words := strings.Fields(data)
	if rows > maxElems || cols > maxElems || rows*cols != len(words) {
		return nil, fmt.Errorf("%w: %d numbers for a %dx%d matrix", ErrValue, len(words), rows, cols)
	}
	out := make([]float64, len(words))
	for i, w := range words {
		v, err := parseNumber(w)
		if err != nil {
			return nil, fmt.Errorf("element %d: %w", i, err)
		}
		out[i] = v
	}
	return out, nil
}
