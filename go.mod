module github.com/midsag/midsag

go 1.26.8

require (
	github.com/suyashkumar/dicom v1.1.0 // indirect
	github.com/yalue/onnxruntime_go v1.27.0 // indirect
	golang.org/x/exp v0.0.0-20240525044651-4c93da0ed11d // indirect
	golang.org/x/text v0.3.8 // indirect
	google.golang.org/protobuf v1.36.12 // indirect
)
