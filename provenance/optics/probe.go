package optics

import "math"

// ProbeDiameterDiffractionM is the diffraction-limited STEM probe diameter to the first
// zero of the Airy pattern, 1.22 λ/α, for convergence semi-angle α (half the cone, not
// the full angle).
func ProbeDiameterDiffractionM(wavelengthM, semiAngleRad float64) float64 {
	return 1.22 * wavelengthM / semiAngleRad
}

// NyquistPixelADFM is the largest pixel that samples an incoherent (ADF) image, whose
// transfer reaches 2α/λ: λ/(4α).
func NyquistPixelADFM(wavelengthM, semiAngleRad float64) float64 {
	return wavelengthM / (4 * semiAngleRad)
}

// NyquistPixelBFM is the largest pixel for coherent (BF, TEM) imaging, whose transfer
// reaches α/λ: λ/(2α).
func NyquistPixelBFM(wavelengthM, semiAngleRad float64) float64 {
	return wavelengthM / (2 * semiAngleRad)
}

// STEMFluenceEPerAngstrom2 is the electron fluence ("dose") of a scan,
// Φ = I·τ·n / (e·Δx²), per pixel area (not probe area: the probe overlaps its
// neighbours, and pixel area is what the specimen receives on average), in e⁻/Å².
// Pixels are square; frames below 1 count as 1.
func STEMFluenceEPerAngstrom2(currentA, dwellS, pixelSizeM float64, frames int) float64 {
	frames = max(frames, 1)
	electronsPerPixel := currentA * dwellS * float64(frames) / ElementaryChargeC
	return electronsPerPixel / (pixelSizeM * pixelSizeM * SquareAngstromsPerSquareM)
}

// TEMFluenceEPerAngstrom2 is Φ = J·t/e with J = I/A over a round illuminated area of
// diameter d (A = πd²/4), in e⁻/Å².
func TEMFluenceEPerAngstrom2(currentA, exposureS, illuminatedDiameterM float64) float64 {
	areaM2 := math.Pi * illuminatedDiameterM * illuminatedDiameterM / 4
	return currentA * exposureS / ElementaryChargeC / (areaM2 * SquareAngstromsPerSquareM)
}

// CollectionAngleRad is θ = r/L for a detector edge at radius r (not diameter) and a
// calibrated camera length L: the definition of camera length (R = λL/d), in the
// small-angle form every microscope console uses.
func CollectionAngleRad(radiusM, cameraLengthM float64) float64 {
	return radiusM / cameraLengthM
}

// ScherzerDefocusM is the Scherzer defocus Δf = −√(4/3)·√(Cs λ), negative for
// underfocus; the "1.155" form, not the "1.2" one some books use.
func ScherzerDefocusM(csM, wavelengthM float64) float64 {
	return -math.Sqrt(4.0/3.0) * math.Sqrt(csM*wavelengthM)
}

// ScherzerResolutionM is the Scherzer point resolution 0.66·(Cs λ³)^¼ (the "0.66"
// form; others use 0.64 or 0.67).
func ScherzerResolutionM(csM, wavelengthM float64) float64 {
	return 0.66 * math.Pow(csM*wavelengthM*wavelengthM*wavelengthM, 0.25)
}
