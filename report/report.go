package report

import (
	"encoding/json"
	"io"
	"math"

	"barygrid/ensemble"
	"barygrid/gaussfit"
	"barygrid/grid"
	"barygrid/io/fieldfile"
	"barygrid/sinkhorn"

	"gonum.org/v1/gonum/mat"
)

// Input describes one input of a barycenter.
type Input struct {
	File    string  `json:"file"`
	Mass    float64 `json:"mass"`
	Dropped float64 `json:"dropped_outside_mask,omitempty"`
	// Weight is normalised (the weights sum to 1).
	Weight   float64    `json:"weight"`
	Centroid [2]float64 `json:"centroid"`
	// Pose relates the input to the template when the inputs were posed.
	Pose *Pose `json:"pose,omitempty"`
}

// Pose is one input's transform (pose.Transform): the input is the
// template mirrored across its principal axis when flipped, turned by
// angle_deg (counter-clockwise as displayed, rows pointing down) and moved
// by -shift.
type Pose struct {
	AngleDeg     float64    `json:"angle_deg"`
	Flipped      bool       `json:"flipped"`
	Shift        [2]float64 `json:"shift"`
	LostFraction float64    `json:"lost_fraction,omitempty"`
}

// Stage is one epsilon stage of a solve (sinkhorn.Stage).
type Stage struct {
	Level          int     `json:"level"`
	Shape          [2]int  `json:"shape"`
	Epsilon        float64 `json:"epsilon"`
	Method         string  `json:"method"`
	Iterations     int     `json:"iterations"`
	NewtonSteps    int     `json:"newton_steps,omitempty"`
	Residual       float64 `json:"residual"`
	DebiasResidual float64 `json:"debias_residual,omitempty"`
	Seconds        float64 `json:"seconds"`
}

// Rank is one input in a ranking by divergence to the barycenter.
type Rank struct {
	File       string  `json:"file"`
	Divergence float64 `json:"divergence"`
	Score      float64 `json:"robust_z"`
	Outlier    bool    `json:"outlier"`
}

// Barycenter is the report of one barycenter.
type Barycenter struct {
	Command      string        `json:"command"`
	Iterations   int           `json:"iterations"`
	Residual     float64       `json:"residual"`
	Seconds      float64       `json:"seconds"`
	Epsilon      float64       `json:"epsilon"`
	EpsilonGiven bool          `json:"epsilon_given"`
	Converged    bool          `json:"converged"`
	Status       string        `json:"status"`
	Message      string        `json:"message,omitempty"`
	Debiased     bool          `json:"debiased"`
	Method       string        `json:"method"`
	Relax        float64       `json:"overrelaxation"`
	Band         int           `json:"kernel_half_width,omitempty"`
	Tol          float64       `json:"tol"`
	MaxIter      int           `json:"max_iter"`
	PixelSize    [2]float64    `json:"pixel_size"`
	Unit         string        `json:"unit,omitempty"`
	Shape        [2]int        `json:"shape"`
	Inputs       []Input       `json:"inputs"`
	Output       string        `json:"output,omitempty"`
	Scaling      string        `json:"output_scaling,omitempty"`
	Mass         float64       `json:"output_mass"`
	Centroid     [2]float64    `json:"output_centroid"`
	Covariance   [2][2]float64 `json:"output_covariance"`
	Residuals    []float64     `json:"residual_history,omitempty"`
	DebiasViol   float64       `json:"debias_violation,omitempty"`
	// With smoothed debiasing DebiasViol is the change of log d in the
	// last iteration (the stopping measure) and DebiasEq the residual of
	// d K d = b, which stays above the tolerance by design.
	SmoothDebias bool    `json:"smooth_debias,omitempty"`
	DebiasEq     float64 `json:"debias_equation_residual,omitempty"`
	Ranking      []Rank  `json:"ranking,omitempty"`
	Unbalanced   float64 `json:"unbalanced_penalty,omitempty"`
	Masked       bool    `json:"masked,omitempty"`
	BaryMass     float64 `json:"barycenter_mass_in_input_units"`
	// EntropicMass is the entropic solution's own mass, which falls as
	// epsilon grows; BaryMass follows the unregularised rule instead (see
	// sinkhorn.Result.Mass). Unbalanced only.
	EntropicMass float64 `json:"entropic_mass_in_input_units,omitempty"`
	Levels       int     `json:"levels"`
	FinestIter   int     `json:"finest_level_iterations"`
	Stages       []Stage `json:"stages"`
	// Spread is the weighted mean squared transport distance of the inputs
	// to the barycenter (squared physical units), when maps were asked for.
	Spread float64 `json:"spread,omitempty"`
	// Maps is the folder the displacement maps went to.
	Maps string `json:"maps,omitempty"`
	// PoseMode is how the inputs were posed (none when absent).
	PoseMode string `json:"pose_mode,omitempty"`
	// CarryOutput is the file of the averaged carried field.
	CarryOutput string `json:"carry_output,omitempty"`
}

// NewBarycenter builds the report of a barycenter of the fields (files
// names them; weights as given, nil for equal) from the settings asked for
// and the result, which carries the values actually used.
func NewBarycenter(files []string, fs []*grid.Field, weights []float64, s sinkhorn.Settings, r *sinkhorn.Result) Barycenter {
	dx, dy := fs[0].PixelSize()
	rep := Barycenter{Command: "barycenter", Iterations: r.Iterations, Residual: r.Residual, Seconds: r.Elapsed.Seconds(),
		Epsilon: r.Epsilon, EpsilonGiven: s.Epsilon != 0, Converged: r.Status == sinkhorn.Converged, Status: r.Status.String(),
		Message: r.Message, Debiased: r.Debiased, Method: r.Method.String(), Relax: r.Relax, Band: r.KernelHalfWidth, Tol: r.Tol,
		MaxIter: r.MaxIter, PixelSize: [2]float64{dx, dy}, Unit: fs[0].Unit, Shape: [2]int{fs[0].Rows, fs[0].Cols},
		Residuals: r.Residuals, DebiasViol: r.DebiasResidual, DebiasEq: r.DebiasEquation, SmoothDebias: s.SmoothDebias, Levels: r.Levels, FinestIter: r.FinestIterations,
		Stages: StagesOf(r.Stages)}
	var wsum float64
	for i := range fs {
		if weights == nil {
			wsum++
		} else {
			wsum += weights[i]
		}
	}
	for i, f := range fs {
		w := 1.0
		if weights != nil {
			w = weights[i]
		}
		m := grid.ComputeMoments(f)
		in := Input{File: files[i], Mass: m.Mass, Weight: w / wsum, Centroid: m.Mean}
		if i < len(r.Dropped) {
			in.Dropped = r.Dropped[i]
		}
		rep.Inputs = append(rep.Inputs, in)
	}
	rep.Unbalanced, rep.Masked, rep.BaryMass, rep.EntropicMass = s.Unbalanced, s.Mask != nil, r.Mass, r.EntropicMass
	if r.Barycenter != nil {
		m := grid.ComputeMoments(r.Barycenter)
		rep.Mass, rep.Centroid, rep.Covariance = m.Mass, m.Mean, m.Cov
	}
	return rep
}

// StagesOf converts the solver's stages.
func StagesOf(st []sinkhorn.Stage) []Stage {
	out := make([]Stage, len(st))
	for i, s := range st {
		out[i] = Stage{Level: s.Level, Shape: [2]int{s.Rows, s.Cols}, Epsilon: s.Epsilon, Method: s.Method.String(),
			Iterations: s.Iterations, NewtonSteps: s.NewtonSteps, Residual: s.Residual, DebiasResidual: s.DebiasResidual, Seconds: s.Elapsed.Seconds()}
	}
	return out
}

// Gaussian is the report (and the exchange format) of a Gaussian
// barycenter: mean and covariance in physical units, how it was solved.
type Gaussian struct {
	Mean       []float64   `json:"mean"`
	Covariance [][]float64 `json:"covariance"`
	Ellipse    *Ellipse    `json:"ellipse,omitempty"`
	Solver     string      `json:"solver"`
	Iterations int         `json:"iterations"`
	GradNorm   float64     `json:"gradient_norm"`
	Converged  bool        `json:"converged"`
	Objective  []float64   `json:"objective_history,omitempty"`
	Seconds    float64     `json:"seconds"`
	Inputs     int         `json:"inputs"`
	MeanMass   float64     `json:"mean_mass,omitempty"`
	Unit       string      `json:"unit,omitempty"`
}

// Ellipse is the one-sigma ellipse of a 2-D Gaussian: semi-axes and the
// major axis's angle from the x axis in degrees.
type Ellipse struct {
	Major    float64 `json:"major"`
	Minor    float64 `json:"minor"`
	AngleDeg float64 `json:"angle_deg"`
}

// NewGaussian builds the report of a Gaussian barycenter result.
func NewGaussian(r *gaussfit.Result, solver string, inputs int) Gaussian {
	b := r.Barycenter
	g := Gaussian{Mean: b.Mean, Covariance: Rows(b.Cov), Solver: solver, Iterations: r.Iterations, GradNorm: r.GradNorm,
		Converged: r.Converged, Objective: r.Objective, Seconds: r.Elapsed.Seconds(), Inputs: inputs}
	if len(b.Mean) == 2 {
		e := gaussfit.EllipseOf(b)
		g.Ellipse = &Ellipse{Major: e.Major, Minor: e.Minor, AngleDeg: e.Angle * 180 / math.Pi}
	}
	return g
}

// Rows returns a symmetric matrix as rows.
func Rows(s *mat.SymDense) [][]float64 {
	n := s.SymmetricDim()
	out := make([][]float64, n)
	for i := range out {
		out[i] = make([]float64, n)
		for j := range out[i] {
			out[i][j] = s.At(i, j)
		}
	}
	return out
}

// WriteJSON writes v as indented JSON, atomically, never replacing an
// existing file unless force.
func WriteJSON(path string, force bool, v any) error {
	return fieldfile.WriteAtomic(path, force, func(w io.Writer) error {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		return enc.Encode(v)
	})
}

// Field is one row of the "inspect" report: a field's grid, units and
// moments. Its JSON names are part of the interface other tools read.
type Field struct {
	File      string     `json:"file"`
	Rows      int        `json:"rows"`
	Cols      int        `json:"cols"`
	PixelSize [2]float64 `json:"pixel_size"`
	Unit      string     `json:"unit"`
	// PixelSizeSource: flag, tiff-resolution, ome, geotiff,
	// netcdf-coordinates or default.
	PixelSizeSource string        `json:"pixel_size_source"`
	Note            string        `json:"note,omitempty"`
	Mass            float64       `json:"mass"`
	Min             float64       `json:"min"`
	Max             float64       `json:"max"`
	Centroid        [2]float64    `json:"centroid"`
	Covariance      [2][2]float64 `json:"covariance"`
}

// NewField summarises field f, read from the file named name.
func NewField(name string, f *grid.Field) Field {
	m := grid.ComputeMoments(f)
	lo, hi := f.MinMax()
	dx, dy := f.PixelSize()
	return Field{File: name, Rows: f.Rows, Cols: f.Cols, PixelSize: [2]float64{dx, dy}, Unit: f.Unit,
		PixelSizeSource: f.PixelSizeSource, Note: f.PixelSizeNote, Mass: m.Mass, Min: lo, Max: hi, Centroid: m.Mean, Covariance: m.Cov}
}

// Distance is the report of one distance between two fields: a Sinkhorn
// divergence (balanced or unbalanced, with the solver's epsilon, tolerance
// and iterations of its three problems) or the Gaussian W2^2.
type Distance struct {
	A          string  `json:"a,omitempty"`
	B          string  `json:"b,omitempty"`
	Divergence float64 `json:"divergence,omitempty"`
	W2Sq       float64 `json:"w2_squared,omitempty"`
	Kind       string  `json:"kind"`
	Epsilon    float64 `json:"epsilon,omitempty"`
	Tol        float64 `json:"tol,omitempty"`
	Unit       string  `json:"unit,omitempty"`
	Iterations []int   `json:"iterations,omitempty"`
	Unbalanced float64 `json:"unbalanced_penalty,omitempty"`
}

// NewDistance builds the report of d between the files a and b (unit: the
// fields' physical unit) under solver settings s.
func NewDistance(a, b, unit string, d ensemble.Distance, s sinkhorn.Settings) Distance {
	o := Distance{A: a, B: b, Kind: d.Kind.String(), Unit: unit}
	if d.Kind == ensemble.GaussianW2 {
		o.W2Sq = d.Value
		return o
	}
	o.Divergence, o.Epsilon, o.Tol, o.Iterations, o.Unbalanced = d.Value, d.Epsilon, s.Tol, d.Iterations, s.Unbalanced
	return o
}
