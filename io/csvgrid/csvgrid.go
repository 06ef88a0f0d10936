package csvgrid

import (
	"bufio"
	"bytes"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"

	"barygrid/grid"
)

// ReadSettings bound what Read accepts (grid.ReadLimits).
type ReadSettings = grid.ReadLimits

// Read parses a delimited numeric grid held in data.
func Read(data []byte, s ReadSettings) (*grid.Field, error) {
	limit := s.Pixels()
	if bytes.IndexByte(data, 0) >= 0 {
		return nil, fmt.Errorf("csvgrid: binary data, not a text grid")
	}
	sc := bufio.NewScanner(bytes.NewReader(data))
	sc.Buffer(make([]byte, 64*1024), 1<<30)
	var (
		vals  []float64
		cols  = -1
		split func(string) []string
		line  int
		rows  int
	)
	for sc.Scan() {
		line++
		text := strings.TrimSpace(strings.TrimPrefix(sc.Text(), "\ufeff"))
		if text == "" || strings.HasPrefix(text, "#") {
			continue
		}
		if split == nil {
			split = detect(text)
			if rows == 0 && isHeader(split(text)) {
				continue
			}
		}
		cells := split(text)
		if cols < 0 {
			cols = len(cells)
		} else if len(cells) != cols {
			return nil, fmt.Errorf("csvgrid: line %d has %d values, want %d (ragged rows)", line, len(cells), cols)
		}
		for c, cell := range cells {
			v, err := strconv.ParseFloat(strings.TrimSpace(cell), 64)
			if err != nil {
				return nil, fmt.Errorf("csvgrid: line %d, column %d: %q is not a number", line, c+1, cell)
			}
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, fmt.Errorf("csvgrid: line %d, column %d: %s is not a finite value", line, c+1, strings.TrimSpace(cell))
			}
			vals = append(vals, v)
		}
		rows++
		if len(vals) > limit {
			return nil, fmt.Errorf("csvgrid: more than the limit of %d values", limit)
		}
	}
	if err := sc.Err(); err != nil {
		return nil, fmt.Errorf("csvgrid: line %d: %w", line+1, err)
	}
	if rows == 0 || cols <= 0 {
		return nil, fmt.Errorf("csvgrid: no numeric rows")
	}
	return &grid.Field{Rows: rows, Cols: cols, Data: vals, Dx: 1, Dy: 1}, nil
}

func detect(line string) func(string) []string {
	for _, d := range []string{"\t", ",", ";"} {
		if strings.Contains(line, d) {
			return func(s string) []string { return strings.Split(s, d) }
		}
	}
	return strings.Fields
}

func isHeader(cells []string) bool {
	for _, c := range cells {
		if _, err := strconv.ParseFloat(strings.TrimSpace(c), 64); err == nil {
			return false
		}
	}
	return true
}

// Write stores f with comma separators and shortest round-trip formatting,
// so that values read back exactly.
func Write(w io.Writer, f *grid.Field) error {
	bw := bufio.NewWriter(w)
	buf := make([]byte, 0, 32)
	for r := 0; r < f.Rows; r++ {
		for c := 0; c < f.Cols; c++ {
			if c > 0 {
				bw.WriteByte(',')
			}
			buf = strconv.AppendFloat(buf[:0], f.Data[r*f.Cols+c], 'g', -1, 64)
			bw.Write(buf)
		}
		bw.WriteByte('\n')
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("csvgrid: %w", err)
	}
	return nil
}
