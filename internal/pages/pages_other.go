//go:build !linux

package pages

func populate(addr, n uintptr) {}
