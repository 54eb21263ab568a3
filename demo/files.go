package demo

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"image"
	"image/color"
	"image/png"
	"math"
	"time"

	"beamledger/provenance"
)

// FileStores is what loading the demo data files needs beyond ProvenanceStores.
type FileStores interface {
	provenance.FileStore
	provenance.DerivationStore
}

// PutObject stores bytes under their content address and names the store, as the
// server does for an upload (the demo passes the server's object store).
type PutObject func(ctx context.Context, sha256Hex string, data []byte) (store string, err error)

// Image and scan sizes: small enough to load in a blink, large enough to look like data.
const (
	surveyPixels  = 256 // the HAADF survey image, square
	scanPositions = 16  // probe positions per side of the 4D-STEM scan
	scanDetector  = 32  // detector pixels per side of each diffraction pattern
)

// LoadFiles gives last week's acquisitions their data files, once: a HAADF survey
// image (a synthetic lattice of atomic columns), a small four-dimensional STEM dataset
// (one diffraction pattern per probe position, uint16, row-major), a virtual
// annular-dark-field image computed from it, and a figure panel made from the survey,
// with the two processing steps recorded as derivations. All of it is invented data.
func LoadFiles(ctx context.Context, st Stores, pst ProvenanceStores, fst FileStores, put PutObject, now time.Time) error {
	_, projects, _, err := demoIDs(ctx, st)
	if err != nil {
		return err
	}
	project := projects["SSB-INTERFACE"]
	have, err := fst.DataFiles(ctx, provenance.FileFilter{ProjectID: project, Limit: 1})
	if err != nil || len(have) > 0 {
		return err
	}
	acqs, err := pst.Acquisitions(ctx, provenance.AcquisitionFilter{ProjectID: project})
	if err != nil {
		return err
	}
	if len(acqs) < 2 {
		return nil // no session to attach files to
	}
	// Newest first: the EELS map, the 4D scan, the survey.
	survey, scanAcq := acqs[len(acqs)-1], acqs[len(acqs)-2]
	record := func(acquisitionID, name, media string, data []byte, by string) (provenance.DataFile, error) {
		sum := sha256.Sum256(data)
		digest := hex.EncodeToString(sum[:])
		store, err := put(ctx, digest, data)
		if err != nil {
			return provenance.DataFile{}, fmt.Errorf("demo file %s: %w", name, err)
		}
		f, _, err := fst.RecordFile(ctx, provenance.NewDataFile{ProjectID: project, AcquisitionID: acquisitionID, SHA256: digest,
			SizeBytes: int64(len(data)), MediaType: media, FileName: name, Store: store, UploadedBy: by}, now)
		return f, err
	}
	researcher := survey.UserID
	img := lattice(surveyPixels)
	surveyImg, err := encodePNG(img)
	if err != nil {
		return err
	}
	surveyFile, err := record(survey.ID, "interface_haadf_0001.png", "image/png", surveyImg, "agent:demo-acquisition-pc")
	if err != nil {
		return err
	}
	scan := fourDScan(scanPositions, scanDetector)
	scanFile, err := record(scanAcq.ID, "interface_4dstem_16x16x32x32_uint16.raw", "application/octet-stream", scan, "agent:demo-acquisition-pc")
	if err != nil {
		return err
	}
	vadf, err := encodePNG(virtualADF(scan, scanPositions, scanDetector, 8, 15))
	if err != nil {
		return err
	}
	vadfFile, err := record("", "interface_virtual_adf.png", "image/png", vadf, researcher)
	if err != nil {
		return err
	}
	panel, err := encodePNG(crop(img, 64, 64, 128))
	if err != nil {
		return err
	}
	panelFile, err := record("", "figure2b_interface_panel.png", "image/png", panel, researcher)
	if err != nil {
		return err
	}
	steps := []provenance.NewDerivation{
		{OutputFileID: vadfFile.ID, InputFileIDs: []string{scanFile.ID}, Software: "virtual-detector", SoftwareVersion: "0.4.2",
			Parameters: json.RawMessage(`{"inner_px": 8, "outer_px": 15, "centre": [16, 16]}`), OperatorID: researcher,
			PerformedAt: scanAcq.EndedAt.Add(2 * time.Hour), Notes: "annular virtual detector on the 4D-STEM scan"},
		{OutputFileID: panelFile.ID, InputFileIDs: []string{surveyFile.ID}, Software: "figure-export", SoftwareVersion: "1.9.0",
			Parameters: json.RawMessage(`{"crop": [64, 64, 128, 128], "scale_bar_nm": 1}`), OperatorID: researcher,
			PerformedAt: survey.EndedAt.Add(26 * time.Hour), Notes: "panel b of the interface figure"},
	}
	for _, d := range steps {
		d.RecordedBy = researcher
		if _, err := fst.RecordDerivation(ctx, d, now); err != nil {
			return fmt.Errorf("demo derivation %s: %w", d.Software, err)
		}
	}
	return nil
}

// lattice draws Gaussian atomic columns on a square lattice, brighter on one side of
// a diagonal boundary, with a little deterministic noise: an invented HAADF image.
func lattice(n int) *image.Gray16 {
	img := image.NewGray16(image.Rect(0, 0, n, n))
	const spacing, sigma = 12.0, 2.2
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			fx, fy := math.Mod(float64(x), spacing)-spacing/2, math.Mod(float64(y), spacing)-spacing/2
			v := math.Exp(-(fx*fx + fy*fy) / (2 * sigma * sigma))
			if x+y > n { // heavier columns past the boundary
				v *= 1.6
			}
			noise := float64((x*7919+y*104729)%97) / 97 * 0.08
			img.SetGray16(x, y, color.Gray16{Y: uint16(math.Min(1, 0.05+0.55*v+noise) * 65535)})
		}
	}
	return img
}

// fourDScan makes one diffraction pattern per probe position: a bright disc whose
// centre shifts across the scan (as strain would shift it) over a faint diffuse ring.
func fourDScan(positions, det int) []byte {
	out := make([]byte, 0, positions*positions*det*det*2)
	for py := 0; py < positions; py++ {
		for px := 0; px < positions; px++ {
			cx, cy := float64(det)/2+float64(px-positions/2)*0.15, float64(det)/2+float64(py-positions/2)*0.1
			for y := 0; y < det; y++ {
				for x := 0; x < det; x++ {
					r := math.Hypot(float64(x)-cx, float64(y)-cy)
					v := 200.0
					if r < 5 {
						v = 30000
					} else if r > 9 && r < 14 {
						v = 900 + 400*math.Cos(float64(px+py))
					}
					out = binary.LittleEndian.AppendUint16(out, uint16(v))
				}
			}
		}
	}
	return out
}

// virtualADF sums each pattern over the annulus from inner to outer detector pixels.
func virtualADF(scan []byte, positions, det, inner, outer int) *image.Gray16 {
	img := image.NewGray16(image.Rect(0, 0, positions, positions))
	sums := make([]float64, positions*positions)
	maxSum := 0.0
	for p := range sums {
		for y := 0; y < det; y++ {
			for x := 0; x < det; x++ {
				r := math.Hypot(float64(x-det/2), float64(y-det/2))
				if r >= float64(inner) && r <= float64(outer) {
					sums[p] += float64(binary.LittleEndian.Uint16(scan[2*(p*det*det+y*det+x):]))
				}
			}
		}
		maxSum = math.Max(maxSum, sums[p])
	}
	for p, s := range sums {
		img.SetGray16(p%positions, p/positions, color.Gray16{Y: uint16(s / maxSum * 65535)})
	}
	return img
}

func crop(img *image.Gray16, x, y, size int) *image.Gray16 {
	return img.SubImage(image.Rect(x, y, x+size, y+size)).(*image.Gray16)
}

func encodePNG(img image.Image) ([]byte, error) {
	var buf bytes.Buffer
	err := png.Encode(&buf, img)
	return buf.Bytes(), err
}
