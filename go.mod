module barygrid

go 1.26.8

require (
	codeberg.org/sbinet/npyio v0.14.0
	github.com/urfave/cli/v2 v2.27.7
	golang.org/x/image v0.48.0
	gonum.org/v1/gonum v0.17.0
)

require (
	github.com/cpuguy83/go-md2man/v2 v2.0.7 // indirect
	github.com/nlpodyssey/gopickle v0.3.0 // indirect
	github.com/russross/blackfriday/v2 v2.1.0 // indirect
	github.com/xrash/smetrics v0.0.0-20240521201337-686a1a2994c1 // indirect
	golang.org/x/text v0.44.0 // indirect
)
