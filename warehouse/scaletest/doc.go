// Package scaletest holds the tests of warehouse-scale mode
// (warehouse.InWarehouse) that run the same data through both engines
// and through the in-memory path. It has no non-test code and must not be
// imported.
package scaletest
