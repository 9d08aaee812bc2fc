module github.com/midsag/midsag

go 1.26.8

require (
	github.com/suyashkumar/dicom v1.1.0
	github.com/yalue/onnxruntime_go v1.27.0
	google.golang.org/protobuf v1.36.12
)

require (
	golang.org/x/exp v0.0.0-20240525044651-4c93da0ed11d // indirect
	golang.org/x/text v0.3.8 // indirect
)
