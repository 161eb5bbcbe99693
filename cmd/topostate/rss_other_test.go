//go:build !unix

package main

import "os"

// maxRSSKiB is not measured on this system.
func maxRSSKiB(*os.ProcessState) int64 { return 0 }
