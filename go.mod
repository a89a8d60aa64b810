module github.com/stochroot/stochroot

go 1.24.0

require (
	github.com/stretchr/testify v1.12.1
	gonum.org/v1/gonum v0.17.0
)

require (
	go.yaml.in/yaml/v3 v3.0.5 // indirect
	golang.org/x/tools v0.30.0 // indirect
)
