package models

import (
	"math"
	"math/rand/v2"
)

// NewExploreRand returns the generator for one exploration decision. Seeding
// it from a fixed seed and the request's sequence number (rather than
// sharing one generator) makes each answer reproducible on its own: a
// replay, or a second replica fed the same requests, picks the same fresh
// items whatever the order in which concurrent requests ran.
func NewExploreRand(seed, request uint64) *rand.Rand {
	return rand.New(rand.NewPCG(seed, request))
}

// sampleBeta draws from Beta(a, b) as X/(X+Y) with X ~ Gamma(a), Y ~
// Gamma(b) (common practice).
func sampleBeta(rng *rand.Rand, a, b float64) float64 {
	x := sampleGamma(rng, a)
	y := sampleGamma(rng, b)
	if x+y == 0 {
		return 0.5
	}
	return x / (x + y)
}

// sampleGamma draws from Gamma(a, 1) by Marsaglia and Tsang's method
// ("A simple method for generating gamma variables", ACM TOMS 26(3),
// 2000); for a < 1 it draws Gamma(a+1) and scales by U^(1/a), as the same
// paper describes.
func sampleGamma(rng *rand.Rand, a float64) float64 {
	if a < 1 {
		u := rng.Float64()
		return sampleGamma(rng, a+1) * math.Pow(u, 1/a)
	}
	d := a - 1.0/3
	c := 1 / math.Sqrt(9*d)
	for {
		x := rng.NormFloat64()
		v := 1 + c*x
		if v <= 0 {
			continue
		}
		v = v * v * v
		u := rng.Float64()
		if u < 1-0.0331*x*x*x*x {
			return d * v
		}
		if math.Log(u) < 0.5*x*x+d*(1-v+math.Log(v)) {
			return d * v
		}
	}
}
