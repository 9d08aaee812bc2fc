package evaluate

// WriteFunc writes a whole file so that a reader never sees it half
// written (for example through a temporary file and a rename).
type WriteFunc func(path string, data []byte) error

// WriteReport writes report.md and report.html for s into dir.
func WriteReport(dir string, s *Summary, write WriteFunc) error {
	return nil
}
