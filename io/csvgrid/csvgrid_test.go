package csvgrid

import (
	"bytes"
	"strings"
	"testing"

	"barygrid/grid"
)

func TestReadDelimiters(t *testing.T) {
	for _, text := range []string{
		"1,2,3\n4,5,6\n", "1\t2\t3\n4\t5\t6\n", "1;2;3\n4;5;6\n", "1 2  3\n 4 5 6\n",
		"a,b,c\n1,2,3\n4,5,6\n", "# comment\n1,2,3\n\n4,5,6\n",
	} {
		f, err := Read([]byte(text), ReadSettings{})
		if err != nil {
			t.Errorf("%q: %v", text, err)
			continue
		}
		if f.Rows != 2 || f.Cols != 3 || f.Data[5] != 6 {
			t.Errorf("%q: got %dx%d %v", text, f.Rows, f.Cols, f.Data)
		}
	}
}

func TestReadErrors(t *testing.T) {
	for text, want := range map[string]string{
		"1,2,3\n4,5\n":      "line 2 has 2 values",
		"1,2,3\n4,NaN,6\n":  "line 2, column 2",
		"1,2,3\n4,5,Inf\n":  "not a finite value",
		"1,2,3\n4,five,6\n": `"five" is not a number`,
		"":                  "no numeric rows",
	} {
		_, err := Read([]byte(text), ReadSettings{})
		if err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("%q: got %v, want %q", text, err, want)
		}
	}
}

func TestRoundTrip(t *testing.T) {
	f := grid.New(2, 3)
	for i := range f.Data {
		f.Data[i] = 1 / float64(i+7)
	}
	var buf bytes.Buffer
	if err := Write(&buf, f); err != nil {
		t.Fatal(err)
	}
	g, err := Read(buf.Bytes(), ReadSettings{})
	if err != nil {
		t.Fatal(err)
	}
	for i := range f.Data {
		if g.Data[i] != f.Data[i] {
			t.Fatalf("value %d: %v != %v", i, g.Data[i], f.Data[i])
		}
	}
}

func FuzzRead(f *testing.F) {
	f.Add([]byte("1,2,3\n4,5,6\n"))
	f.Add([]byte("x\ty\n1\t2\n"))
	f.Add([]byte("1 2\n3\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		// Whatever parses re-writes (shortest exact decimals) and parses to
		// the same field.
		g, err := Read(data, ReadSettings{MaxPixels: 1 << 16})
		if err != nil {
			return
		}
		var buf bytes.Buffer
		if err := Write(&buf, g); err != nil {
			t.Fatalf("re-encode: %v", err)
		}
		h, err := Read(buf.Bytes(), ReadSettings{MaxPixels: 1 << 16})
		if err != nil {
			t.Fatalf("parse of the re-written file: %v", err)
		}
		if !grid.Identical(g, h) {
			t.Fatalf("round trip changed the field (%dx%d)", g.Rows, g.Cols)
		}
	})
}
