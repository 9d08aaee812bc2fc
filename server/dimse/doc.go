// Package dimse is midsag's DICOM network side: the PS3.8 upper layer
// (associations over TCP) and the PS3.7 DIMSE services Verification
// (C-ECHO) and Storage (C-STORE), as an SCP that hands every received
// instance to a StoreHandler as a DICOM Part 10 file, and as an SCU that
// sends Part 10 files to another node.
//
// A listener is one Server:
//
//	srv, err := dimse.NewServer(dimse.Config{AETitle: "MIDSAG"}, handler)
//	...
//	err = srv.Serve(ctx, listener)
//
// and a sender is a Client:
//
//	c := dimse.Client{CallingAE: "MIDSAG", CalledAE: "PACS"}
//	statuses, err := c.Store(ctx, "pacs:104", files)
//
// Sections of PS3.4, PS3.5, PS3.7, PS3.8 and PS3.10 cited beside the
// code, and the field layouts and codes they name, were written from
// memory without the standard at hand; the tests check them against
// DCMTK's echoscu, storescu, storescp and dcmdump.
//
// Only what the wire carries is handled here: datasets are not parsed
// beyond the File Meta Information, and no transfer syntax is converted.
package dimse
