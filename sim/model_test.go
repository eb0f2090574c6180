package sim

import (
	"math"
	"math/rand/v2"
	"os"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// puppetModel is the invented puppet of testdata/figures/puppet.json hung
// by four strings (head, both hands, hips) from anchors 0.3 m above those
// nodes, strings 0.29 m long so they start taut by 1 cm.
func puppetModel(t testing.TB, s ModelSettings) (*Model, []float64) {
	t.Helper()
	data, err := os.ReadFile("testdata/figures/puppet.json")
	if err != nil {
		t.Fatal(err)
	}
	fig, err := ParseFigure("puppet.json", data)
	if err != nil {
		t.Fatal(err)
	}
	var strs []StringLink
	var anchors []float64
	for _, name := range []string{"head", "l_hand", "r_hand", "hips"} {
		i := fig.NodeIndex(name)
		strs = append(strs, StringLink{Node: i, RestLengthM: 0.29, StiffnessNPerM: 300})
		p := fig.Nodes[i].PositionM
		anchors = append(anchors, p[0], p[1], p[2]+0.3)
	}
	if s.StepS == 0 {
		s.StepS = 0.01
	}
	m, err := NewModel(fig, strs, s)
	if err != nil {
		t.Fatal(err)
	}
	return m, anchors
}

// randomMotion returns x_t and x_{t−1}: the rest pose moved by up to amp
// metres per coordinate, with velocities up to vel m/s (fixed seed via rng).
func randomMotion(m *Model, rest []float64, rng *rand.Rand, amp, vel float64) (xCur, xPrev []float64) {
	xCur = make([]float64, len(rest))
	xPrev = make([]float64, len(rest))
	for k := range rest {
		xCur[k] = rest[k] + amp*(2*rng.Float64()-1)
		xPrev[k] = xCur[k] - m.h*vel*(2*rng.Float64()-1)
	}
	return xCur, xPrev
}

// bandToDense expands an unfactorised band matrix (lower storage) to a
// dense symmetric matrix.
func bandToDense(b *bandMatrix) *mat.Dense {
	d := mat.NewDense(b.n, b.n, nil)
	for i := range b.n {
		for j := max(0, i-b.kd); j <= i; j++ {
			v := b.data[i*(b.kd+1)+j-i+b.kd]
			d.Set(i, j, v)
			d.Set(j, i, v)
		}
	}
	return d
}

// relErr is max|got − want| / max|want|: the error relative to the size of
// the matrix (common practice for comparing Jacobians; a per-entry ratio
// would blow up on entries that are zero up to rounding).
func relErr(got, want mat.Matrix) float64 {
	r, c := want.Dims()
	var num, den float64
	for i := range r {
		for j := range c {
			num = math.Max(num, math.Abs(got.At(i, j)-want.At(i, j)))
			den = math.Max(den, math.Abs(want.At(i, j)))
		}
	}
	if den == 0 {
		return num
	}
	return num / den
}

func TestNewModelRefusesBadInput(t *testing.T) {
	fig := &Figure{Nodes: []Node{{Name: "a", MassKg: 1}}}
	if _, err := NewModel(fig, nil, ModelSettings{}); err == nil {
		t.Error("a zero step was accepted")
	}
	if _, err := NewModel(fig, []StringLink{{Node: 3, RestLengthM: 1, StiffnessNPerM: 1}}, ModelSettings{StepS: 0.01}); err == nil {
		t.Error("a string to a missing node was accepted")
	}
	if _, err := NewModel(fig, []StringLink{{Node: 0, RestLengthM: 0, StiffnessNPerM: 1}}, ModelSettings{StepS: 0.01}); err == nil {
		t.Error("a string of zero length was accepted")
	}
	if _, err := NewModel(&Figure{Nodes: []Node{{Name: "a", MassKg: 1, Anchored: true}}}, nil, ModelSettings{StepS: 0.01}); err == nil {
		t.Error("a figure with no free node was accepted")
	}
	if _, err := NewModel(&Figure{Nodes: []Node{{Name: "a", MassKg: math.NaN()}}}, nil, ModelSettings{StepS: 0.01}); err == nil {
		t.Error("a NaN mass was accepted")
	}
	m, err := NewModel(fig, nil, ModelSettings{StepS: 0.01})
	if err != nil {
		t.Fatal(err)
	}
	if m.gravity != StandardGravityMPerS2 || m.slackW != DefaultSlackWidthM || m.gradTol != DefaultGradTolM || m.maxIters != DefaultMaxNewtonIters {
		t.Errorf("zero settings did not give the defaults: %+v", m)
	}
	if m.Dim() != 3 || m.NumAnchors() != 0 {
		t.Errorf("Dim %d NumAnchors %d", m.Dim(), m.NumAnchors())
	}
}

type denseT = mat.Dense

func newDense(r, c int) *mat.Dense { return mat.NewDense(r, c, nil) }
