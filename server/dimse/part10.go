package dimse

import "github.com/midsag/midsag/part10"

// fileMeta is what the SCU needs from a Part 10 file: its File Meta
// Information and the dataset after it.
type fileMeta struct {
	part10.Meta
	dataset []byte
}

// parsePart10 reads a Part 10 file with part10.Parse.
func parsePart10(b []byte) (fileMeta, error) {
	m, ds, err := part10.Parse(b)
	return fileMeta{Meta: m, dataset: ds}, err
}
