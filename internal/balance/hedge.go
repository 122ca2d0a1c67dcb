package balance

import (
	"errors"
	"math"
)

// Hypothesis is one explanation of a branch's survey: the multiplier on its
// fixed parts it implies and its posterior weight (only the weights' ratios
// count).
type Hypothesis struct {
	Multiplier float64
	Weight     float64
}

// HedgeCase is one branch at a plan, seen from its take-offs: the plan's
// differential across it is taken as held whatever the branch passes (one
// branch of many moves the headers little), so each hypothesis's flow at a
// setting follows from the branch alone.
type HedgeCase struct {
	// Rest is the drop across the branch's fixed parts at multiplier 1, Pa,
	// at flow q (m3/s), and its slope; it must rise with q.
	Rest func(q float64) (dp, slope float64)
	// Diff is the branch differential at the plan, Pa; Target the flow to
	// reach, m3/s; Open the valve's drop fully open at Target, Pa.
	Diff, Target, Open float64
	// Low and High bound the tolerance band as fractions of Target (-0.1,
	// 0.1), and Spread is the standard deviation, as a fraction, of what
	// else moves the flow after setting (the valve's Kv tolerance, the
	// headers); a zero band leaves the loss squared error alone.
	Low, High, Spread float64
}

// HedgeResult is Hedge's choice: the multiplier to plan the branch at and,
// per hypothesis, the flow it would then get as a fraction of target.
type HedgeResult struct {
	Multiplier float64
	Flows      []float64
}

// errHedge reports a case Hedge cannot work on.
var errHedge = errors.New("balance: a hedge needs a rising rest drop, a positive differential and target, and hypotheses with positive multipliers and weights")

// outOfBand is the loss of a branch outside its tolerance band, in units of
// its squared departure: as much as missing by twice a ±10 % tolerance
// (common practice, no source).
const outOfBand = 0.04

// hedgeGrid is the number of multipliers tried between the hypotheses'
// extremes, evenly in ln: under 1 % apart over a fourfold range, finer than
// any valve's handwheel.
const hedgeGrid = 161

// Hedge chooses the multiplier on a branch's fixed parts to plan its valve
// setting at when its readings have more than one explanation, so that the
// expected loss over the explanations, weighted by their posterior
// probabilities, is least: the Bayes action (Berger, Statistical Decision
// Theory and Bayesian Analysis, 2nd ed. 1985, 2.4 and 4.4). The loss of a
// flow q (as a fraction of target) is (q-1)² plus outOfBand times the
// probability that q, blurred by Spread, falls outside the band: a branch
// out of tolerance fails its commissioning however near it is, so the
// likeliest explanation is kept in band where it can be, and the squared
// term then pulls the others as near as it allows. With a single hypothesis
// the choice is that hypothesis's multiplier.
func Hedge(c HedgeCase, hs []Hypothesis) (HedgeResult, error) {
	if c.Rest == nil || !(c.Diff > 0) || !(c.Target > 0) || !(c.Open >= 0) || len(hs) == 0 {
		return HedgeResult{}, errHedge
	}
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, h := range hs {
		if !(h.Multiplier > 0) || !(h.Weight > 0) || math.IsInf(h.Multiplier, 0) || math.IsInf(h.Weight, 0) {
			return HedgeResult{}, errHedge
		}
		lo, hi = min(lo, h.Multiplier), max(hi, h.Multiplier)
	}
	rest1, _ := c.Rest(c.Target)
	if !(rest1 > 0) {
		return HedgeResult{}, errHedge
	}
	eval := func(mc float64) ([]float64, float64) {
		// The valve set for the target under mc takes what the fixed parts
		// leave of the differential, at least its fully open drop; its
		// coefficient k then holds under every hypothesis.
		k := max(c.Diff-mc*rest1, c.Open) / (c.Target * c.Target)
		flows := make([]float64, len(hs))
		var loss float64
		for j, h := range hs {
			flows[j] = branchFlow(c, h.Multiplier, k) / c.Target
			d := flows[j] - 1
			loss += h.Weight * d * d
			if c.High > c.Low {
				loss += h.Weight * outOfBand * (1 - inBandProb(d, c.Low, c.High, c.Spread))
			}
		}
		return flows, loss
	}
	var best HedgeResult
	bestLoss := math.Inf(1)
	steps := hedgeGrid - 1
	if lo == hi {
		steps = 0
	}
	for g := 0; g <= steps; g++ {
		mc := lo
		if steps > 0 {
			mc = lo * math.Pow(hi/lo, float64(g)/float64(steps))
		}
		if flows, loss := eval(mc); loss < bestLoss {
			best, bestLoss = HedgeResult{Multiplier: mc, Flows: flows}, loss
		}
	}
	return best, nil
}

// FlowAt is the flow, as a fraction of c.Target, that c.Diff drives through
// the fixed parts at multiplier r and a valve whose drop at c.Target is
// valveDrop (square law), as Hedge works it out.
func (c HedgeCase) FlowAt(r, valveDrop float64) float64 {
	return branchFlow(c, r, valveDrop/(c.Target*c.Target)) / c.Target
}

// branchFlow is the flow (m3/s) that balances c.Diff across the fixed parts
// at multiplier r and a valve of coefficient k (drop k q²): Newton's method
// from the square law's answer, kept inside a bracket that bisection
// narrows when a step leaves it.
func branchFlow(c HedgeCase, r, k float64) float64 {
	rest1, _ := c.Rest(c.Target)
	q := c.Target * math.Sqrt(c.Diff/(r*rest1+k*c.Target*c.Target))
	lo, hi := 0.0, math.Inf(1)
	for range 100 {
		d, slope := c.Rest(q)
		f := r*d + k*q*q - c.Diff
		if f < 0 {
			lo = q
		} else {
			hi = q
		}
		if math.Abs(f) <= 1e-12*c.Diff {
			break
		}
		next := q - f/(r*slope+2*k*q)
		switch {
		case next > lo && next < hi && !math.IsNaN(next):
		case math.IsInf(hi, 1):
			next = 2 * q
		default:
			next = (lo + hi) / 2
		}
		if math.Abs(next-q) <= 1e-13*q {
			q = next
			break
		}
		q = next
	}
	return q
}

// inBandProb is the probability that dev+e lies in [low, high] for e normal
// with standard deviation sd (a plain indicator when sd is 0).
func inBandProb(dev, low, high, sd float64) float64 {
	if !(sd > 0) {
		if dev >= low && dev <= high {
			return 1
		}
		return 0
	}
	phi := func(x float64) float64 { return 0.5 * math.Erfc(-x/math.Sqrt2) }
	return phi((high-dev)/sd) - phi((low-dev)/sd)
}
