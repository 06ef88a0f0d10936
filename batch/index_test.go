package batch

import (
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"barygrid/grid"
	"barygrid/io/fieldfile"
	"barygrid/sinkhorn"

	"golang.org/x/net/html"
)

// The results page parses as HTML (golang.org/x/net/html, the WHATWG
// parsing algorithm), names every group with failures first, links every
// picture that exists, and points at nothing outside the output folder (no
// scheme, no absolute path, no ..) and at no script.
func TestIndexPage(t *testing.T) {
	dir := t.TempDir()
	in, out := filepath.Join(dir, "in"), filepath.Join(dir, "out")
	for _, g := range []string{"alpha", "beta", "gamma"} {
		os.MkdirAll(filepath.Join(in, g), 0o755)
		for k := 0; k < 2; k++ {
			f := grid.New(16, 16)
			for i := range f.Data {
				x, y := float64(i%16)-6-float64(k), float64(i/16)-7
				f.Data[i] = math.Exp(-(x*x + y*y) / 6)
			}
			fieldfile.Save(filepath.Join(in, g, string(rune('a'+k))+".npy"), f, fieldfile.SaveSettings{})
		}
	}
	os.WriteFile(filepath.Join(in, "gamma", "broken.png"), []byte("not an image"), 0o644)
	groups, err := Discover(in)
	if err != nil {
		t.Fatal(err)
	}
	os.MkdirAll(out, 0o755)
	rows := Run(groups, Job{Out: out, Solver: sinkhorn.Settings{Epsilon: 2}, Key: map[string]any{}}, RunSettings{})
	data, err := os.ReadFile(filepath.Join(out, IndexName))
	if err != nil {
		t.Fatal(err)
	}
	doc, err := html.Parse(strings.NewReader(string(data)))
	if err != nil {
		t.Fatal(err)
	}
	var links []string
	var text strings.Builder
	var walk func(*html.Node)
	walk = func(n *html.Node) {
		if n.Type == html.ElementNode {
			if n.Data == "script" {
				t.Error("the page has a script")
			}
			for _, a := range n.Attr {
				if a.Key == "href" || a.Key == "src" {
					links = append(links, a.Val)
				}
			}
		}
		if n.Type == html.TextNode {
			text.WriteString(n.Data)
		}
		for c := n.FirstChild; c != nil; c = c.NextSibling {
			walk(c)
		}
	}
	walk(doc)
	for _, l := range links {
		if strings.HasPrefix(l, "#") {
			continue
		}
		if strings.Contains(l, ":") || strings.HasPrefix(l, "/") || strings.Contains(l, "..") {
			t.Errorf("link %q leaves the output folder", l)
		}
		if _, err := os.Stat(filepath.Join(out, filepath.FromSlash(l))); err != nil {
			t.Errorf("link %q points at nothing", l)
		}
	}
	for _, r := range rows {
		if !strings.Contains(text.String(), r.Group) {
			t.Errorf("group %s missing", r.Group)
		}
		if r.Status == "ok" {
			for _, pic := range []string{"contact_sheet.png", "convergence.png", "barycenter.png"} {
				found := false
				for _, l := range links {
					found = found || l == r.Group+"/"+pic
				}
				if !found {
					t.Errorf("%s/%s not linked", r.Group, pic)
				}
			}
		}
	}
	if i, j := strings.Index(text.String(), "gamma"), strings.Index(text.String(), "alpha"); i < 0 || i > j {
		t.Error("the failed group is not listed first")
	}
}
