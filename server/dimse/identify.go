package dimse

import (
	"bytes"
	"compress/flate"
	"encoding/binary"
	"io"
	"strings"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/part10"
)

// maxIdentifyBytes bounds how much of a deflated dataset is inflated to
// find its SOP Common attributes, which sit at its start (group 0008).
const maxIdentifyBytes = 64 << 10

// datasetUIDs returns the SOP Class UID (0008,0016) and SOP Instance UID
// (0008,0018) of a dataset encoded in transfer syntax ts, read from the
// first elements only; ok is false when they cannot be found there (a
// sequence of undefined length before them, a damaged start), and the
// caller leaves the decision to the full parse behind the handler.
func datasetUIDs(ts string, data []byte) (sopClass, sopInstance string, ok bool) {
	order := binary.ByteOrder(binary.LittleEndian)
	explicit := ts != midsag.ImplicitVRLittleEndian
	switch ts {
	case midsag.ExplicitVRBigEndian:
		order = binary.BigEndian
	case midsag.DeflatedExplicitVRLittleEndian:
		// PS3.5 A.5: the whole dataset is deflated (RFC 1951, no header).
		b, err := io.ReadAll(io.LimitReader(flate.NewReader(bytes.NewReader(data)), maxIdentifyBytes))
		if err != nil && len(b) == 0 {
			return "", "", false
		}
		data = b
	}
	for off := 0; off+8 <= len(data); {
		group, elem := order.Uint16(data[off:]), order.Uint16(data[off+2:])
		if group > 0x0008 {
			break
		}
		var n, hl int
		switch {
		case !explicit:
			n, hl = int(order.Uint32(data[off+4:])), 8
		case part10.LongVR(string(data[off+4 : off+6])):
			if off+12 > len(data) {
				return "", "", false
			}
			n, hl = int(order.Uint32(data[off+8:])), 12
		default:
			n, hl = int(order.Uint16(data[off+6:])), 8
		}
		if n < 0 || uint32(n) == 0xFFFFFFFF || n > len(data)-off-hl {
			return "", "", false
		}
		v := strings.TrimRight(string(data[off+hl:off+hl+n]), "\x00 ")
		switch {
		case group == 0x0008 && elem == 0x0016:
			sopClass = v
		case group == 0x0008 && elem == 0x0018:
			return sopClass, v, sopClass != ""
		}
		off += hl + n
	}
	return "", "", false
}
