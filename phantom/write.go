package phantom

import (
	"fmt"
	"math"
	"math/rand/v2"
	"strconv"
	"strings"
	"time"

	"github.com/midsag/midsag"
)

// write renders and encodes every frame of the plan. It returns the files
// in shuffled order and the SOP Instance UID of the target's centre slice.
func (s *study) write(plan []*series, center int) ([]File, string, error) {
	r := s.r
	naming := r.IntN(3)
	var files []File
	var centerUID string
	seriesTime := s.date
	maxVal := math.Pow(2, float64(s.bitsStore)) - 1
	gain := uniform(r, 2000, 3000) // CSF near 2/3 of 12-bit full scale
	if s.bitsStore == 16 {
		gain = uniform(r, 3000, 16000)
	}
	for _, sr := range plan {
		seriesTime = seriesTime.Add(timeStep(r))
		snr := uniform(r, 15, 30)
		lk := look{
			table:   &intensity[sr.contrast],
			gain:    gain,
			sigma:   gain * 0.45 / snr, // SNR against cord-like signal
			maxVal:  maxVal,
			biasPer: uniform(r, 0, 0.0025),
		}
		common := s.seriesElements(sr, seriesTime)
		pixRNG := rngFor("pixels", s.opts.Seed, s.index, sr.number)
		for k, f := range sr.frames {
			uid := uidFrom("instance", s.opts.Seed, s.index, sr.number, k)
			if sr.kind == kindT2Sag && k == center {
				centerUID = uid
			}
			pix := render(s.neck, s.pose, f, lk, pixRNG)
			if pixelHook != nil {
				pixelHook(uid, pix)
			}
			ds := append(dataset(nil), common...)
			ds.text(0x00080018, "UI", uid)
			ds.is(0x00200013, sr.instance[k])
			ds.ds(0x00200032, f.ipp[0], f.ipp[1], f.ipp[2])
			ds.ds(0x00200037, f.row[0], f.row[1], f.row[2], f.col[0], f.col[1], f.col[2])
			// Slice Location (PS3.3 C.7.6.2, type 3): position along the
			// normal, as scanners commonly write it (common practice).
			ds.ds(0x00201041, round(f.normal().dot(f.ipp), 4))
			ds.us(0x00280010, uint16(f.rows))
			ds.us(0x00280011, uint16(f.cols))
			ds.ds(0x00280030, f.spacing, f.spacing)
			ds.ds(0x00180050, f.thick)
			if err := s.pixelData(&ds, pix, f); err != nil {
				return nil, "", fmt.Errorf("series %d image %d: %w", sr.number, k, err)
			}
			data, err := encodePart10(ds, s.ts)
			if err != nil {
				return nil, "", fmt.Errorf("series %d image %d: %w", sr.number, k, err)
			}
			files = append(files, File{Data: data})
		}
	}
	r.Shuffle(len(files), func(i, j int) { files[i], files[j] = files[j], files[i] })
	for i := range files {
		var name string
		switch naming {
		case 0:
			name = fmt.Sprintf("IM%04d.dcm", i+1)
		case 1:
			name = fmt.Sprintf("%016x.dcm", r.Uint64())
		default:
			name = fmt.Sprintf("MR%06d", 100000+i*7)
		}
		files[i].Name = studyDir(s.index) + "/" + name
	}
	return files, centerUID, nil
}

// pixelHook, when set by a test, sees the stored values of every image
// before encoding, so decoded pixels can be compared with what was meant.
var pixelHook func(sopInstanceUID string, pix []uint16)

// timeStep is the gap between series starts.
func timeStep(r *rand.Rand) time.Duration {
	return time.Duration(60+r.IntN(300)) * time.Second
}

// pixelData adds Image Pixel module attributes (PS3.3 C.7.6.3) and Pixel
// Data, native or encapsulated per the study's transfer syntax.
func (s *study) pixelData(ds *dataset, pix []uint16, f frame) error {
	ds.us(0x00280002, 1)
	ds.text(0x00280004, "CS", "MONOCHROME2")
	ds.us(0x00280100, 16)
	ds.us(0x00280101, uint16(s.bitsStore))
	ds.us(0x00280102, uint16(s.bitsStore-1))
	ds.us(0x00280103, 0)
	if isEncapsulated(s.ts) {
		frag, err := encodeFrame(s.ts, pix, f.rows, f.cols, s.bitsStore)
		if err != nil {
			return err
		}
		*ds = append(*ds, element{tag: 0x7FE00010, vr: "OB", frag: [][]byte{frag}})
		return nil
	}
	*ds = append(*ds, element{tag: 0x7FE00010, vr: "OW", u16: pix})
	return nil
}

// seriesElements returns the attributes shared by every instance of a
// series: Patient (PS3.3 C.7.1.1), General Study (C.7.2.1), General Series
// (C.7.3.1), Frame of Reference (C.7.4.1), General Equipment (C.7.5.1),
// General Image (C.7.6.1), MR Image (C.8.3.1) and SOP Common (C.12.1).
func (s *study) seriesElements(sr *series, t time.Time) dataset {
	var d dataset
	date := t.Format("20060102")
	d.text(0x00080008, "CS", sr.imageType)
	d.text(0x00080016, "UI", midsag.MRImageStorage)
	d.text(0x00080020, "DA", s.date.Format("20060102"))
	d.text(0x00080021, "DA", date)
	d.text(0x00080023, "DA", date)
	d.text(0x00080030, "TM", s.date.Format("150405"))
	d.text(0x00080031, "TM", t.Format("150405"))
	d.text(0x00080033, "TM", t.Format("150405"))
	d.text(0x00080050, "SH", "")
	d.text(0x00080060, "CS", "MR")
	d.text(0x00080070, "LO", Manufacturer)
	d.text(0x00080090, "PN", "")
	d.text(0x00081030, "LO", "CERVICAL SPINE PHANTOM")
	d.text(0x0008103E, "LO", sr.desc)
	d.text(0x00081090, "LO", "midsag phantom")
	d.text(0x00100010, "PN", fmt.Sprintf("PHANTOM^%04d", s.index+1))
	d.text(0x00100020, "LO", fmt.Sprintf("NSIL%d-%04d", s.opts.Seed, s.index+1))
	d.text(0x00100030, "DA", "")
	d.text(0x00100040, "CS", []string{"F", "M"}[s.index%2])
	// Patient Identity Removed and its method (PS3.3 C.7.1.1): there never
	// was a patient.
	d.text(0x00120062, "CS", "YES")
	d.text(0x00120063, "LO", "synthetic phantom, no patient data")
	d.text(0x00180015, "CS", "CSPINE")
	d.text(0x00180020, "CS", sr.scanSeq)
	d.text(0x00180021, "CS", sr.variant)
	d.text(0x00180022, "CS", sr.opts)
	d.text(0x00180023, "CS", "2D")
	d.text(0x00180024, "SH", sr.seqName)
	d.ds(0x00180080, sr.tr)
	d.ds(0x00180081, sr.te)
	if strings.Contains(sr.scanSeq, "IR") {
		// Inversion Time is type 2C: required when Scanning Sequence
		// includes IR (PS3.3 C.8.3.1).
		d.ds(0x00180082, sr.ti)
	}
	d.ds(0x00180083, 1)
	d.ds(0x00180087, s.field)
	if sr.kind != kindLocalizer {
		d.ds(0x00180088, round(sr.spacingBetween, 4))
	}
	d.is(0x00180091, sr.etl)
	d.text(0x00181020, "LO", "midsag-phantom 1")
	d.ds(0x00181314, sr.flip)
	d.text(0x00185100, "CS", "HFS")
	d.text(0x0020000D, "UI", s.studyUID)
	d.text(0x0020000E, "UI", sr.uid)
	d.text(0x00200010, "SH", strconv.Itoa(s.index+1))
	d.is(0x00200011, sr.number)
	d.is(0x00200012, 1)
	d.text(0x00200052, "UI", s.forUID)
	d.text(0x00201040, "LO", "")
	d.text(0x00280301, "CS", "NO")
	return d
}
