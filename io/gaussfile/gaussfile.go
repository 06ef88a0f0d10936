package gaussfile

import (
	"bufio"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"

	"barygrid/gaussfit"
)

// Line is one JSON-lines record.
type Line struct {
	Mean   []float64   `json:"mean"`
	Cov    [][]float64 `json:"cov"`
	Weight *float64    `json:"weight,omitempty"`
}

// LineSource reads JSON lines as a gaussfit.Source. Blank lines and lines
// starting with # are skipped; every error names the source and the line.
type LineSource struct {
	name string
	r    *bufio.Reader
	line int
	dim  int
}

// NewLineSource reads from r; name (a file name, or "standard input")
// prefixes errors.
func NewLineSource(r io.Reader, name string) *LineSource {
	return &LineSource{name: name, r: bufio.NewReaderSize(r, 1<<16)}
}

// Next returns the next Gaussian and its weight (1 when absent), or io.EOF.
func (s *LineSource) Next() (gaussfit.Gaussian, float64, error) {
	for {
		text, err := s.r.ReadString('\n')
		if text == "" && errors.Is(err, io.EOF) {
			return gaussfit.Gaussian{}, 0, io.EOF
		}
		if err != nil && !errors.Is(err, io.EOF) {
			return gaussfit.Gaussian{}, 0, fmt.Errorf("%s: %v", s.name, err)
		}
		s.line++
		text = strings.TrimSpace(text)
		if text == "" || strings.HasPrefix(text, "#") {
			if errors.Is(err, io.EOF) {
				return gaussfit.Gaussian{}, 0, io.EOF
			}
			continue
		}
		var l Line
		dec := json.NewDecoder(strings.NewReader(text))
		dec.DisallowUnknownFields()
		if derr := dec.Decode(&l); derr != nil {
			return gaussfit.Gaussian{}, 0, fmt.Errorf("%s: line %d: not a Gaussian object: %v", s.name, s.line, derr)
		}
		if s.dim == 0 {
			s.dim = len(l.Mean)
		}
		if len(l.Mean) == 0 || len(l.Mean) != s.dim {
			return gaussfit.Gaussian{}, 0, fmt.Errorf("%s: line %d: mean of length %d, want %d", s.name, s.line, len(l.Mean), s.dim)
		}
		cov, cerr := gaussfit.CheckCov(l.Cov, s.dim)
		if cerr != nil {
			return gaussfit.Gaussian{}, 0, fmt.Errorf("%s: line %d: %w", s.name, s.line, cerr)
		}
		w := 1.0
		if l.Weight != nil {
			w = *l.Weight
			if !(w >= 0) {
				return gaussfit.Gaussian{}, 0, fmt.Errorf("%s: line %d: weight %g", s.name, s.line, w)
			}
		}
		return gaussfit.Gaussian{Mean: l.Mean, Cov: cov}, w, nil
	}
}

// ReadAll collects a source's Gaussians and weights (for the solvers that
// need them all in memory).
func ReadAll(src gaussfit.Source) ([]gaussfit.Gaussian, []float64, error) {
	var gs []gaussfit.Gaussian
	var ws []float64
	for {
		g, w, err := src.Next()
		if errors.Is(err, io.EOF) {
			return gs, ws, nil
		}
		if err != nil {
			return nil, nil, err
		}
		gs, ws = append(gs, g), append(ws, w)
	}
}

// Entry is one Gaussian of a Gaussians file.
type Entry struct {
	Mean       []float64   `json:"mean"`
	Covariance [][]float64 `json:"covariance"`
	Weight     *float64    `json:"weight,omitempty"`
}

// File is a Gaussians file: {"gaussians": [...]}.
type File struct {
	Gaussians []Entry `json:"gaussians"`
}

// ReadFile reads a Gaussians file and returns the Gaussians (checked:
// one dimension, symmetric positive-definite covariances) and their
// weights (1 when absent). Errors name the file and the entry.
func ReadFile(path string) ([]gaussfit.Gaussian, []float64, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, nil, fmt.Errorf("%s: %v", path, pathCause(err))
	}
	var gf File
	dec := json.NewDecoder(strings.NewReader(string(data)))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&gf); err != nil {
		return nil, nil, fmt.Errorf("%s: not a Gaussians file: %v", path, err)
	}
	if len(gf.Gaussians) == 0 {
		return nil, nil, fmt.Errorf("%s: no Gaussians", path)
	}
	d := len(gf.Gaussians[0].Mean)
	var gs []gaussfit.Gaussian
	var ws []float64
	for i, g := range gf.Gaussians {
		if len(g.Mean) != d || d == 0 {
			return nil, nil, fmt.Errorf("%s: Gaussian %d has a mean of length %d, want %d", path, i+1, len(g.Mean), d)
		}
		cov, err := gaussfit.CheckCov(g.Covariance, d)
		if err != nil {
			return nil, nil, fmt.Errorf("%s: Gaussian %d: %w", path, i+1, err)
		}
		w := 1.0
		if g.Weight != nil {
			w = *g.Weight
			if !(w >= 0) {
				return nil, nil, fmt.Errorf("%s: Gaussian %d has weight %g", path, i+1, w)
			}
		}
		gs = append(gs, gaussfit.Gaussian{Mean: g.Mean, Cov: cov})
		ws = append(ws, w)
	}
	return gs, ws, nil
}

func pathCause(err error) error {
	if pe, ok := err.(*os.PathError); ok {
		return pe.Err
	}
	return err
}
