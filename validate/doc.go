// Package validate proves whether a part's model lets a PPF-based robot
// cell find the part. (Package documentation is completed below.)
package validate
