// Package store keeps what the service has accepted: every received DICOM
// instance in a spool folder (temporary file, fsync, rename) with a row in
// an SQLite database, and every result version. Nothing is acknowledged to
// a sender before it is durable here.
package store
