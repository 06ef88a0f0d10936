package render

import (
	"barygrid/gaussfit"
	"fmt"
	"image"
	"image/color"
	"image/draw"
	"io"
	"math"

	"barygrid/grid"
	"barygrid/io/imagefile"

	"github.com/disintegration/imaging"
	"golang.org/x/image/font"
	"golang.org/x/image/font/basicfont"
	"golang.org/x/image/math/fixed"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
)

// Tile is one labelled picture of a contact sheet.
type Tile struct {
	Label string
	Image image.Image
}

// FieldTile colour-maps a field (each on its own scale) for a sheet.
func FieldTile(label string, f *grid.Field) Tile {
	im, _ := Colorize(f, imagefile.WriteSettings{})
	return Tile{Label: label, Image: im}
}

// SheetSettings of a contact sheet; zero values mean 128-pixel thumbnails and
// six columns.
type SheetSettings struct {
	Thumb, Columns int
	Title          string
}

var (
	paper = color.NRGBA{18, 20, 28, 255}
	ink   = color.NRGBA{230, 232, 238, 255}
)

// Contact returns a sheet of thumbnails with their labels under them.
func Contact(tiles []Tile, s SheetSettings) *image.NRGBA {
	th, cols := s.Thumb, s.Columns
	if th <= 0 {
		th = 128
	}
	if cols <= 0 {
		cols = 6
	}
	cols = max(1, min(cols, len(tiles)))
	rows := (len(tiles) + cols - 1) / cols
	const pad, label, head = 8, 16, 22
	w := cols*(th+pad) + pad
	h := head + rows*(th+label+pad) + pad
	sheet := image.NewNRGBA(image.Rect(0, 0, w, h))
	draw.Draw(sheet, sheet.Bounds(), &image.Uniform{paper}, image.Point{}, draw.Src)
	text(sheet, pad, 15, s.Title)
	for i, t := range tiles {
		x := pad + (i%cols)*(th+pad)
		y := head + (i/cols)*(th+label+pad)
		// Scale every picture to the tile, up as well as down, so that
		// fields and overlays of one grid show at one size.
		b0 := t.Image.Bounds()
		sc := math.Min(float64(th)/float64(b0.Dx()), float64(th)/float64(b0.Dy()))
		thumb := imaging.Resize(t.Image, max(1, int(float64(b0.Dx())*sc)), max(1, int(float64(b0.Dy())*sc)), imaging.NearestNeighbor)
		b := thumb.Bounds()
		off := image.Pt(x+(th-b.Dx())/2, y+(th-b.Dy())/2)
		draw.Draw(sheet, image.Rectangle{off, off.Add(b.Size())}, thumb, b.Min, draw.Src)
		text(sheet, x, y+th+12, clip(t.Label, th/7))
	}
	return sheet
}

func clip(s string, n int) string {
	if len(s) <= n || n < 4 {
		return s
	}
	return "..." + s[len(s)-n+3:]
}

func text(dst *image.NRGBA, x, y int, s string) {
	d := font.Drawer{Dst: dst, Src: &image.Uniform{ink}, Face: basicfont.Face7x13, Dot: fixed.P(x, y)}
	d.DrawString(s)
}

// Convergence writes a PNG plot of the residual history (log scale) with
// the tolerance as a horizontal line, w x h points.
func Convergence(out io.Writer, residuals []float64, tol float64, title string, w, h vg.Length) error {
	p := plot.New()
	p.Title.Text = title
	p.X.Label.Text = "iteration"
	p.Y.Label.Text = "first-marginal violation (L1)"
	p.Y.Scale = plot.LogScale{}
	p.Y.Tick.Marker = decades{}
	var pts plotter.XYs
	for i, r := range residuals {
		if r > 0 && !math.IsInf(r, 0) && !math.IsNaN(r) {
			pts = append(pts, plotter.XY{X: float64(i + 1), Y: r})
		}
	}
	if len(pts) == 0 {
		return fmt.Errorf("sheet: no positive residuals to plot")
	}
	line, err := plotter.NewLine(pts)
	if err != nil {
		return fmt.Errorf("sheet: %w", err)
	}
	line.Color = color.NRGBA{40, 90, 200, 255}
	p.Add(line)
	if tol > 0 {
		tl, _ := plotter.NewLine(plotter.XYs{{X: 1, Y: tol}, {X: float64(len(residuals)), Y: tol}})
		tl.Color = color.NRGBA{200, 70, 40, 255}
		tl.Dashes = []vg.Length{vg.Points(4), vg.Points(3)}
		p.Add(tl)
		p.Legend.Add("residual", line)
		p.Legend.Add("tolerance", tl)
		p.Legend.Top = true
	}
	wt, err := p.WriterTo(w, h, "png")
	if err != nil {
		return fmt.Errorf("sheet: %w", err)
	}
	_, err = wt.WriteTo(out)
	return err
}

// decades puts a labelled tick at every power of ten in range.
type decades struct{}

func (decades) Ticks(lo, hi float64) []plot.Tick {
	var ts []plot.Tick
	for e := math.Floor(math.Log10(lo)); e <= math.Ceil(math.Log10(hi)); e++ {
		v := math.Pow(10, e)
		if v >= lo*0.999 && v <= hi*1.001 {
			ts = append(ts, plot.Tick{Value: v, Label: fmt.Sprintf("1e%d", int(e))})
		}
	}
	if len(ts) < 2 { // less than a decade: label the ends
		ts = []plot.Tick{{Value: lo, Label: fmt.Sprintf("%.2g", lo)}, {Value: hi, Label: fmt.Sprintf("%.2g", hi)}}
	}
	return ts
}

// Summary lays out the inputs (labelled), their pixel mean, the barycenter
// and the Gaussian ellipses (inputs and their barycenter) over the pixel
// mean: the sheet a person looks at first.
func Summary(title string, labels []string, fs []*grid.Field, mean, bary *grid.Field, gs []gaussfit.Gaussian, gb gaussfit.Gaussian) *image.NRGBA {
	var tiles []Tile
	for i, f := range fs {
		tiles = append(tiles, FieldTile(labels[i], f))
	}
	tiles = append(tiles, FieldTile("pixel mean", mean), FieldTile("barycenter", bary))
	bg, _ := Colorize(mean, imagefile.WriteSettings{})
	dx, dy := fs[0].PixelSize()
	zoom := max(1, 128/max(fs[0].Rows, fs[0].Cols))
	tiles = append(tiles, Tile{Label: "Gaussian ellipses", Image: Ellipses(bg, dx, dy, zoom, gs, gb)})
	return Contact(tiles, SheetSettings{Title: fmt.Sprintf("%s: %d inputs", title, len(fs))})
}
