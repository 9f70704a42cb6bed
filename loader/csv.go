package loader

import (
	"bufio"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"os"
	"strconv"
	"strings"

	"github.com/vitals-health/vitals/tensor"
)

// OpenCSV opens a comma-separated table for a tabular model: every column is
// one float32 feature and every row one sample, so batches are [k, F].
//
// The first row is a header when any of its cells is not a number (a header
// made only of numbers is read as data). Cells are parsed with
// strconv.ParseFloat after trimming spaces ("nan" and "inf" are accepted);
// an empty or non-numeric cell, a value outside float32 range, or a row with
// a different number of cells is an error naming the file, line and column
// (1-based field number). A UTF-8 byte-order mark is skipped. Rows are read
// one by one, so Len is -1 (unknown).
func OpenCSV(path string) (Source, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("reading %q: %w", path, err)
	}
	s, err := newCSVSource(path, f)
	if err != nil {
		f.Close()
		return nil, err
	}
	s.c = f
	return s, nil
}

type csvSource struct {
	name    string
	c       io.Closer
	r       *csv.Reader
	header  []string
	nf      int
	pending []float32 // first row when it was data
	err     error     // sticky error
}

func newCSVSource(name string, in io.Reader) (*csvSource, error) {
	br := bufio.NewReader(in)
	if b, err := br.Peek(3); err == nil && string(b) == "\xef\xbb\xbf" {
		br.Discard(3)
	}
	r := csv.NewReader(br)
	r.TrimLeadingSpace = true
	r.ReuseRecord = true
	s := &csvSource{name: name, r: r}
	rec, err := r.Read()
	if err == io.EOF {
		return nil, fmt.Errorf("reading %q: empty CSV file", name)
	}
	if err != nil {
		return nil, s.wrap(err)
	}
	s.nf = len(rec)
	row := make([]float32, len(rec))
	isHeader := false
	for j, cell := range rec {
		v, err := strconv.ParseFloat(strings.TrimSpace(cell), 32)
		if err != nil {
			isHeader = true
			break
		}
		row[j] = float32(v)
	}
	if isHeader {
		s.header = append([]string{}, rec...)
	} else {
		s.pending = row
	}
	return s, nil
}

func (s *csvSource) Name() string        { return s.name }
func (s *csvSource) SampleShape() []int  { return []int{s.nf} }
func (s *csvSource) DType() tensor.DType { return tensor.Float32 }
func (s *csvSource) Len() int            { return -1 }

func (s *csvSource) Close() error {
	s.err = errClosed
	if s.c == nil {
		return nil
	}
	err := s.c.Close()
	s.c = nil
	return err
}

func (s *csvSource) wrap(err error) error {
	var pe *csv.ParseError
	if errors.As(err, &pe) {
		return fmt.Errorf("reading %q: line %d, column %d: %w", s.name, pe.Line, pe.Column, pe.Err)
	}
	return fmt.Errorf("reading %q: %w", s.name, err)
}

func (s *csvSource) Next(n int) (*tensor.Tensor, error) {
	if n <= 0 {
		return nil, fmt.Errorf("reading %q: batch size %d", s.name, n)
	}
	if s.err != nil {
		if s.err == io.EOF {
			return nil, io.EOF
		}
		if s.err == errClosed {
			return nil, fmt.Errorf("reading %q: %w", s.name, s.err)
		}
		return nil, s.err
	}
	data := make([]float32, 0, min(n, 1024)*s.nf)
	k := 0
	if s.pending != nil {
		data = append(data, s.pending...)
		s.pending = nil
		k++
	}
	for k < n {
		rec, err := s.r.Read()
		if err == io.EOF {
			s.err = io.EOF
			break
		}
		if err != nil {
			s.err = s.wrap(err)
			return nil, s.err
		}
		for j, cell := range rec {
			v, err := s.parse(cell, j)
			if err != nil {
				s.err = err
				return nil, err
			}
			data = append(data, v)
		}
		k++
	}
	if k == 0 {
		return nil, io.EOF
	}
	return &tensor.Tensor{DType: tensor.Float32, Shape: []int{k, s.nf}, Data: data}, nil
}

// parse converts field j of the record just read, with a located error.
func (s *csvSource) parse(cell string, j int) (float32, error) {
	t := strings.TrimSpace(cell)
	v, err := strconv.ParseFloat(t, 32)
	if err == nil {
		return float32(v), nil
	}
	line, _ := s.r.FieldPos(j)
	col := fmt.Sprintf("column %d", j+1)
	if s.header != nil {
		col += fmt.Sprintf(" (%q)", s.header[j])
	}
	why := fmt.Sprintf("%q is not a number", t)
	switch {
	case t == "":
		why = "empty cell"
	case errors.Is(err, strconv.ErrRange):
		why = fmt.Sprintf("%q is outside float32 range", t)
	}
	return 0, fmt.Errorf("reading %q: line %d, %s: %s", s.name, line, col, why)
}
