package models

import (
	"math"
	"time"
)

// DefaultHalfLife is the decay half-life when none is configured.
const DefaultHalfLife = 7 * 24 * time.Hour

// maxExponent bounds (t-ref)/H before the pipeline moves its reference
// forward, far below float64's exponent range of ±1022.
const maxExponent = 256

// Decay turns event times into landmark weights (see the package doc).
type Decay struct {
	HalfLifeMS float64
	Ref        int64 // reference time, unix ms
}

// NewDecay returns a decay with the given half-life and reference time.
func NewDecay(halfLife time.Duration, ref int64) Decay {
	return Decay{HalfLifeMS: float64(halfLife.Milliseconds()), Ref: ref}
}

// Weight returns the landmark weight of a click at ts.
func (d Decay) Weight(ts int64) float64 {
	return math.Exp2(float64(ts-d.Ref) / d.HalfLifeMS)
}

// Factor returns the factor that turns a landmark value into its decayed
// value at now.
func (d Decay) Factor(now int64) float64 {
	return math.Exp2(-float64(now-d.Ref) / d.HalfLifeMS)
}

// NeedsRebase reports whether ts is so far past the reference that weights
// would lose range; the pipeline then rescales every model.
func (d Decay) NeedsRebase(ts int64) bool {
	return float64(ts-d.Ref)/d.HalfLifeMS > maxExponent
}

// Rescaler is a model whose stored values can be multiplied by a common
// factor, used when the decay reference moves.
type Rescaler interface {
	Rescale(f float64)
}

// DecayAware is a model that needs the pipeline's decay parameters.
type DecayAware interface {
	SetDecay(d Decay)
}
