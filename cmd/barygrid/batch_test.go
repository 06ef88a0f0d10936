package main

import (
	"barygrid/batch"
	"encoding/csv"
	"image/png"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"barygrid/io/fieldfile"
)

func makeGroups(t *testing.T, root string, names ...string) {
	for gi, g := range names {
		os.MkdirAll(filepath.Join(root, g), 0o755)
		for i := 0; i < 3; i++ {
			p := filepath.Join(root, g, string(rune('a'+i))+".npy")
			if _, err := fieldfile.Save(p, blob(20, 20, 7+2*float64(i)+float64(gi), 9+float64(i), 3), fieldfile.SaveSettings{}); err != nil {
				t.Fatal(err)
			}
		}
	}
}

func readSummary(t *testing.T, path string) map[string][]string {
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if strings.Join(recs[0][:5], ",") != "group,status,inputs,iterations,seconds" {
		t.Fatalf("header %v", recs[0])
	}
	out := map[string][]string{}
	for _, r := range recs[1:] {
		out[r[0]] = r
	}
	return out
}

// Four groups, one with a corrupt file: three succeed, the fourth is
// reported failed with its reason, no partial output, exit status 1. A
// rerun skips the finished groups without touching them; a changed input
// recomputes its group only.
func TestBatchFailureIsolationAndResume(t *testing.T) {
	dir := t.TempDir()
	in, out := filepath.Join(dir, "in"), filepath.Join(dir, "out")
	makeGroups(t, in, "g1", "g2", "g3", "g4")
	os.WriteFile(filepath.Join(in, "g4", "broken.png"), []byte("not an image"), 0o644)
	code, _, errs := runCLI(t, "batch", "--epsilon", "2", "--quiet", "--out", out, in)
	if code != 1 {
		t.Fatalf("exit %d, want 1: %s", code, errs)
	}
	sum := readSummary(t, filepath.Join(out, "summary.csv"))
	for _, g := range []string{"g1", "g2", "g3"} {
		if sum[g][1] != "ok" {
			t.Errorf("%s: %v", g, sum[g])
		}
		for _, o := range batch.Outputs {
			if _, err := os.Stat(filepath.Join(out, g, o)); err != nil {
				t.Errorf("%s: missing %s", g, o)
			}
		}
	}
	if sum["g4"][1] != "failed" || !strings.Contains(sum["g4"][6], "broken.png") {
		t.Errorf("g4: %v", sum["g4"])
	}
	if _, err := os.Stat(filepath.Join(out, "g4")); err == nil {
		t.Error("partial output left for the failed group")
	}
	entries, _ := os.ReadDir(out)
	for _, e := range entries {
		if strings.HasPrefix(e.Name(), ".") {
			t.Errorf("temporary folder left: %s", e.Name())
		}
	}
	// Pictures decode with the expected size and are not blank.
	for _, name := range []string{"contact_sheet.png", "convergence.png"} {
		f, _ := os.Open(filepath.Join(out, "g1", name))
		im, err := png.Decode(f)
		f.Close()
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		b := im.Bounds()
		if b.Dx() < 300 || b.Dy() < 150 {
			t.Errorf("%s: size %v", name, b)
		}
		seen := map[[3]uint32]bool{}
		for y := b.Min.Y; y < b.Max.Y; y += 3 {
			for x := b.Min.X; x < b.Max.X; x += 3 {
				r, g, bl, _ := im.At(x, y).RGBA()
				seen[[3]uint32{r >> 8, g >> 8, bl >> 8}] = true
			}
		}
		if len(seen) < 5 {
			t.Errorf("%s looks blank (%d colours)", name, len(seen))
		}
	}
	st1, _ := os.Stat(filepath.Join(out, "g1", "barycenter.npy"))
	time.Sleep(20 * time.Millisecond)
	// Change one input of g2 and rerun without the broken group.
	os.Remove(filepath.Join(in, "g4", "broken.png"))
	fieldfile.Save(filepath.Join(in, "g2", "a.npy"), blob(20, 20, 12, 12, 3), fieldfile.SaveSettings{Force: true})
	code, _, errs = runCLI(t, "batch", "--epsilon", "2", "--quiet", "--out", out, in)
	if code != 0 {
		t.Fatalf("rerun exit %d: %s", code, errs)
	}
	sum = readSummary(t, filepath.Join(out, "summary.csv"))
	want := map[string]string{"g1": "skipped", "g2": "ok", "g3": "skipped", "g4": "ok"}
	for g, s := range want {
		if sum[g][1] != s {
			t.Errorf("rerun %s: %v, want %s", g, sum[g], s)
		}
	}
	st2, _ := os.Stat(filepath.Join(out, "g1", "barycenter.npy"))
	if !st1.ModTime().Equal(st2.ModTime()) {
		t.Error("skipped group's output was rewritten")
	}
}

// Shards 1/2 and 2/2 together compute every group exactly once.
func TestShardsPartition(t *testing.T) {
	dir := t.TempDir()
	in := filepath.Join(dir, "in")
	makeGroups(t, in, "s1", "s2", "s3", "s4", "s5")
	seen := map[string]int{}
	for _, sh := range []string{"1/2", "2/2"} {
		out := filepath.Join(dir, "out"+sh[:1])
		code, _, errs := runCLI(t, "batch", "--epsilon", "2", "--quiet", "--shard", sh, "--out", out, in)
		if code != 0 {
			t.Fatalf("shard %s: exit %d %s", sh, code, errs)
		}
		for g := range readSummary(t, filepath.Join(out, "summary.csv")) {
			seen[g]++
		}
	}
	for _, g := range []string{"s1", "s2", "s3", "s4", "s5"} {
		if seen[g] != 1 {
			t.Errorf("group %s processed %d times over both shards", g, seen[g])
		}
	}
}

func TestManifest(t *testing.T) {
	dir := t.TempDir()
	makeGroups(t, filepath.Join(dir, "in"), "m")
	man := filepath.Join(dir, "groups.csv")
	os.WriteFile(man, []byte("group,file,weight\nx,in/m/a.npy,1\nx,in/m/b.npy,3\ny,in/m/c.npy,1\ny,in/m/a.npy,1\n"), 0o644)
	out := filepath.Join(dir, "out")
	code, _, errs := runCLI(t, "batch", "--epsilon", "2", "--quiet", "--manifest", man, "--out", out)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	sum := readSummary(t, filepath.Join(out, "summary.csv"))
	if sum["x"][1] != "ok" || sum["y"][1] != "ok" || sum["x"][2] != "2" {
		t.Errorf("summary %v", sum)
	}
}
