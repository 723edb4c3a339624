//go:build !validate

package main

// demoGrid is the districts per side of TestDemoAndReport's world in make
// test; make validate runs it on a larger one.
const demoGrid = 4
