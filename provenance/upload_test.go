package provenance

import (
	"encoding/base64"
	"testing"
)

func TestUploadPartSize(t *testing.T) {
	const seg = 8 << 20
	for _, c := range []struct{ length, want int64 }{
		{0, seg},
		{1, seg},
		{10000 * seg, seg},       // exactly 10 000 segments
		{10000*seg + 1, 2 * seg}, // one byte more needs two segments a part
		{2 << 40, 27 * seg},      // 2 TiB: 219.9 MB a part, rounded up to segments
		{100 * seg, seg},
	} {
		got := UploadPartSize(c.length, seg, MaxUploadParts)
		if got != c.want {
			t.Errorf("UploadPartSize(%d) = %d, want %d", c.length, got, c.want)
		}
		if parts := (c.length + got - 1) / got; parts > MaxUploadParts || got%seg != 0 {
			t.Errorf("length %d: %d parts of %d", c.length, parts, got)
		}
	}
}

func TestParseUploadMetadata(t *testing.T) {
	b := func(s string) string { return base64.StdEncoding.EncodeToString([]byte(s)) }
	acq := "0b6c5f8e-3f0e-4b1e-9d6a-0a4c6f1d2e3f"
	// [published: FIPS 180-4 examples] SHA-256("abc"), in upper case: read as lower.
	const abc = "BA7816BF8F01CFEA414140DE5DAE2223B00361A396177A9CB410FF61F20015AD"
	m, err := ParseUploadMetadata("filename " + b("scan 1.raw") + ", acquisition_id " + b(acq) + ",sha256 " + b(abc) + ",flag,other " + b("x"))
	if err != nil || m.Target.FileName != "scan 1.raw" || m.Target.AcquisitionID != acq || m.Target.MediaType != "application/octet-stream" ||
		m.SHA256 != "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad" {
		t.Fatalf("%+v %v", m, err)
	}
	for name, header := range map[string]string{
		"no file name":   "acquisition_id " + b(acq),
		"a path":         "filename " + b("../x") + ",acquisition_id " + b(acq),
		"no target":      "filename " + b("x"),
		"not base64":     "filename !!!,acquisition_id " + b(acq),
		"repeated key":   "filename " + b("x") + ",filename " + b("y") + ",acquisition_id " + b(acq),
		"short digest":   "filename " + b("x") + ",acquisition_id " + b(acq) + ",sha256 " + b("abc"),
		"bad media type": "filename " + b("x") + ",acquisition_id " + b(acq) + ",media_type " + b("not a type"),
		"empty metadata": "",
	} {
		if _, err := ParseUploadMetadata(header); err == nil {
			t.Errorf("%s: accepted", name)
		}
	}
}
