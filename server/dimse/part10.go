package dimse

import "github.com/midsag/midsag/part10"

// fileMeta is what the SCU needs from a Part 10 file.
type fileMeta struct {
	sopClass, sopInstance, transferSyntax string
	dataset                               []byte
}

// parsePart10 reads the File Meta Information of a Part 10 file
// (part10.Parse) and returns the dataset after it.
func parsePart10(b []byte) (fileMeta, error) {
	m, ds, err := part10.Parse(b)
	return fileMeta{sopClass: m.SOPClassUID, sopInstance: m.SOPInstanceUID, transferSyntax: m.TransferSyntaxUID, dataset: ds}, err
}
