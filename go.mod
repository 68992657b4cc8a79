module github.com/aftercast/aftercast

go 1.26.8
