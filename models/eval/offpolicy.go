package eval

import "math"

// OffPolicyTestName names the estimators of OffPolicy.
const OffPolicyTestName = "inverse propensity scoring (IPS) and its self-normalised form (SNIPS); 95 % intervals by the normal approximation (SNIPS: delta method); effective sample size (Σw)²/Σw²"

// LoggedSlot is one shown slot of a logged answer: the probability with
// which the logging policy put the item there, the probability with which
// the target policy would have, and the reward observed (1 for a click).
type LoggedSlot struct {
	Logged float64 // the logging policy's probability, in (0, 1]
	Target float64 // the target policy's probability, in [0, 1]
	Reward float64
}

// OffPolicyEstimate is what a target policy would have scored on the
// logged slots, estimated from the logging policy's rewards.
type OffPolicyEstimate struct {
	Slots int64 `json:"slots"`
	// Supported counts slots the target policy would also have shown
	// (weight > 0).
	Supported int64      `json:"supported"`
	IPS       float64    `json:"ips"`
	IPSCI95   [2]float64 `json:"ips_ci95"`
	SNIPS     float64    `json:"snips"`
	SNIPSCI95 [2]float64 `json:"snips_ci95"`
	// ESS is the effective sample size of the weights, (Σw)²/Σw²: how many
	// slots of the target policy's own traffic the estimate is worth.
	ESS float64 `json:"ess"`
	// Skipped counts slots with a logged probability outside (0, 1],
	// which no estimate can use.
	Skipped int64 `json:"skipped"`
	// Warning is set when the logged probabilities give too little support
	// for the estimate to mean much.
	Warning string `json:"warning,omitempty"`
}

// MinESS is the effective sample size below which an off-policy estimate
// is reported with a warning: under a hundred effective slots a click rate
// of a few percent rests on a handful of clicks (common practice: a rule of
// thumb, not a theorem).
const MinESS = 100

// EstimateOffPolicy estimates the target policy's reward per slot from
// logged slots, as OffPolicyTestName says.
func EstimateOffPolicy(slots []LoggedSlot) OffPolicyEstimate {
	var e OffPolicyEstimate
	var sw, sw2, swr, swr2 float64
	var n int64
	for _, s := range slots {
		if !(s.Logged > 0 && s.Logged <= 1) || s.Target < 0 || s.Target > 1 || math.IsNaN(s.Reward) {
			e.Skipped++
			continue
		}
		n++
		w := s.Target / s.Logged
		if w > 0 {
			e.Supported++
		}
		sw += w
		sw2 += w * w
		swr += w * s.Reward
		swr2 += (w * s.Reward) * (w * s.Reward)
	}
	e.Slots = n
	if n == 0 {
		e.Warning = "no logged slot with a usable probability"
		return e
	}
	nf := float64(n)
	e.IPS = swr / nf
	if n > 1 {
		v := max(0, (swr2-nf*e.IPS*e.IPS)/(nf-1))
		h := z975 * math.Sqrt(v/nf)
		e.IPSCI95 = [2]float64{e.IPS - h, e.IPS + h}
	} else {
		e.IPSCI95 = [2]float64{e.IPS, e.IPS}
	}
	if sw > 0 {
		e.SNIPS = swr / sw
		e.ESS = sw * sw / sw2
		// Delta method: Var(SNIPS) ≈ Σ w_i² (r_i − SNIPS)² / (Σ w_i)².
		var num float64
		for _, s := range slots {
			if !(s.Logged > 0 && s.Logged <= 1) || s.Target < 0 || s.Target > 1 || math.IsNaN(s.Reward) {
				continue
			}
			w := s.Target / s.Logged
			d := s.Reward - e.SNIPS
			num += w * w * d * d
		}
		h := z975 * math.Sqrt(num) / sw
		e.SNIPSCI95 = [2]float64{e.SNIPS - h, e.SNIPS + h}
	}
	switch {
	case e.Supported == 0:
		e.Warning = "the target policy shows none of the logged slots: no support to estimate from"
	case e.ESS < MinESS:
		e.Warning = "effective sample size below 100: the logged probabilities give too little support for this estimate"
	}
	return e
}
