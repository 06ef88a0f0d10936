package main

import (
	"encoding/json"
	"fmt"
	"os"
	"strings"
	"text/tabwriter"

	"barygrid/io/fieldfile"
	"barygrid/report"

	"github.com/urfave/cli/v2"
)

func inspectCommand() *cli.Command {
	return withUsage(&cli.Command{
		Name:      "inspect",
		Usage:     "print shape, pixel size, mass, range, centroid and covariance of each file",
		ArgsUsage: "FILE...",
		Flags: append(inputFlags(),
			&cli.BoolFlag{Name: "json", Usage: "print a JSON array instead of a table"},
		),
		Action: func(c *cli.Context) error {
			if c.NArg() == 0 {
				return usagef("inspect: no input files")
			}
			s, err := loadSettings(c)
			if err != nil {
				return err
			}
			s.SkipValidate = true
			var rows []report.Field
			for _, p := range c.Args().Slice() {
				planes, labels, err := fieldfile.LoadPlanes(p, s)
				if err != nil {
					return err
				}
				for i, f := range planes {
					if err := f.Validate(); err != nil {
						return fmt.Errorf("%s: %w", labels[i], err)
					}
					row := report.NewField(labels[i], f)
					if s.Dx > 0 {
						// Say what the flag replaced, when the file has its own.
						own := s
						own.Dx, own.Dy, own.Unit = 0, 0, ""
						if g, err := fieldfile.Load(p, own); err == nil && g.PixelSizeSource != "default" {
							gx, gy := g.PixelSize()
							row.Note = fmt.Sprintf("the file says %gx%g %s (%s); --pixel-size overrides it", gx, gy, g.Unit, g.PixelSizeSource)
						}
					}
					rows = append(rows, row)
				}
			}
			if c.Bool("json") {
				enc := json.NewEncoder(os.Stdout)
				enc.SetIndent("", "  ")
				return enc.Encode(rows)
			}
			tw := tabwriter.NewWriter(os.Stdout, 0, 4, 2, ' ', 0)
			fmt.Fprintln(tw, "file\tshape\tpixel (source)\tmass\tmin..max\tcentroid (x, y)\tcov xx, xy, yy")
			for _, r := range rows {
				unit := r.Unit
				fmt.Fprintf(tw, "%s\t%dx%d\t%gx%g%s (%s)\t%.6g\t%.4g..%.4g\t(%.4g, %.4g)\t%.4g, %.4g, %.4g\n",
					r.File, r.Rows, r.Cols, r.PixelSize[0], r.PixelSize[1], unit, r.PixelSizeSource, r.Mass, r.Min, r.Max,
					r.Centroid[0], r.Centroid[1], r.Covariance[0][0], r.Covariance[0][1], r.Covariance[1][1])
			}
			if err := tw.Flush(); err != nil {
				return err
			}
			for _, r := range rows {
				if r.Note != "" {
					hint := ""
					if strings.Contains(r.Note, "converted to km") {
						hint = " (--degrees keeps degrees)"
					}
					fmt.Printf("note: %s: %s%s\n", r.File, r.Note, hint)
				}
			}
			return nil
		},
	})
}
