package main

import (
	"math"
	"math/rand/v2"
	"time"
)

// The demo's river is invented: a river authority's three dissolved-oxygen
// sondes, S03 upstream in a shaded reach, S05 in the middle, S07 below a
// weir, each logging every ten minutes. Nothing here is measured data; the
// physics is made up to look and behave like a lowland river in summer:
//
//   - water temperature follows the sun (warmest mid-afternoon) and passing
//     weather (two swings with periods of about 19 and 32 hours, so that a
//     day's window sees most of the range), offset per site;
//   - flow wanders slowly around 9 m³/s, larger downstream;
//   - oxygen is a fixed share of saturation, which falls as the water warms,
//     plus a daily photosynthesis swing (highest mid-afternoon), plus
//     re-aeration that grows with flow, plus a site offset and sensor noise.
//
// From foulAt on, S07's sonde fouls: a biofilm grows on its membrane over
// foulRamp and its readings sag at warm temperatures (where the film
// respires fastest), so its temperature response flattens.

// demoSites are the sondes, upstream first.
var demoSites = []riverSite{
	{name: "S03", tempOffset: -1.3, flowShare: 0.7, oxygenOffset: 0.35},
	{name: "S05", tempOffset: 0, flowShare: 1, oxygenOffset: 0},
	{name: "S07", tempOffset: 1.1, flowShare: 1.15, oxygenOffset: -0.45},
}

// foulingSite is the site whose sonde fouls.
const foulingSite = "S07"

const (
	// readingsPerHour is how often each sonde logs (every ten minutes).
	readingsPerHour = 6
	// foulRamp is how long the fouling takes to reach full strength.
	foulRamp = 3 * time.Hour
	// foulSlope is the fouled sonde's low bias per °C above foulFrom, at
	// full strength, in mg/L.
	foulSlope = 0.3
	foulFrom  = 11.0
	// oxygenNoise is the sensor noise's standard deviation, mg/L.
	oxygenNoise = 0.22
)

type riverSite struct {
	name         string
	tempOffset   float64 // °C
	flowShare    float64 // of the reference flow
	oxygenOffset float64 // mg/L: riffles above, organic load below
}

// reading is one logged sonde reading.
type reading struct {
	observed time.Time // simulated time
	site     string
	temp     float64 // water temperature, °C
	flow     float64 // m³/s
	hour     float64 // hour of day, [0, 24)
	oxygen   float64 // dissolved oxygen, mg/L
}

// river simulates the sondes. It is not safe for concurrent use.
type river struct {
	rng    *rand.Rand
	origin time.Time // simulated time the weather is measured from
	// foulAt is when S07 starts fouling; zero: never.
	foulAt time.Time
	// flowNoise is the slowly wandering part of the log flow (AR(1)).
	flowNoise float64
}

func newRiver(seed uint64, origin time.Time) *river {
	return &river{rng: rand.New(rand.NewPCG(seed, 0x5eed0f0a11)), origin: origin}
}

// hour returns the readings of the simulated hour starting at t, for
// every site, in time order.
func (r *river) hour(t time.Time) []reading {
	out := make([]reading, 0, readingsPerHour*len(demoSites))
	for i := range readingsPerHour {
		at := t.Add(time.Duration(i) * time.Hour / readingsPerHour)
		// One flow innovation per time step, shared by the sites (they are
		// on one river).
		r.flowNoise = 0.97*r.flowNoise + 0.03*r.rng.NormFloat64()
		for _, s := range demoSites {
			out = append(out, r.read(at, s))
		}
	}
	return out
}

func (r *river) read(at time.Time, s riverSite) reading {
	h := float64(at.Hour()) + float64(at.Minute())/60
	since := at.Sub(r.origin).Hours()
	temp := 15 + s.tempOffset +
		2.6*math.Sin(2*math.Pi*(h-10)/24) + // the sun: warmest about 16:00
		3.2*math.Sin(2*math.Pi*since/19.3) + // passing weather
		2.0*math.Sin(2*math.Pi*since/31.7+1.3) +
		0.15*r.rng.NormFloat64()
	flow := 9 * s.flowShare * math.Exp(0.35*math.Sin(2*math.Pi*since/53+0.5)+0.2*math.Sin(2*math.Pi*since/13.1)+r.flowNoise)
	oxygen := 0.93*saturation(temp) +
		0.9*math.Sin(2*math.Pi*(h-8.5)/24) + // photosynthesis by day, respiration by night
		0.55*math.Log(flow/9) + // re-aeration grows with flow
		s.oxygenOffset +
		oxygenNoise*r.rng.NormFloat64()
	if s.name == foulingSite && !r.foulAt.IsZero() && !at.Before(r.foulAt) {
		strength := min(1, float64(at.Sub(r.foulAt))/float64(foulRamp))
		oxygen -= strength * foulSlope * max(0, temp-foulFrom)
	}
	return reading{observed: at, site: s.name, temp: temp, flow: flow, hour: h, oxygen: max(oxygen, 0)}
}

// saturation is dissolved oxygen at saturation in fresh water at sea level,
// mg/L, at temperature t in °C: a cubic fit of the usual tables (from
// memory; good enough for invented data).
func saturation(t float64) float64 {
	return 14.652 - 0.41022*t + 0.007991*t*t - 0.000077774*t*t*t
}
