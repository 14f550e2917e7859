// Package physics holds the pure models of the simulated bench: the
// magnetizing circuit (current supply with slew limit and compliance, winding
// inductance, resistance and heating), the specimen (Jiles–Atherton or a
// Stoner–Wohlfarth ensemble, optional classical eddy-current field), the
// fixture geometry that turns current into H, and the sensing instruments
// (integrator, Hall-probe field meter, thermometer) with their errors.
//
// Nothing here does I/O or reads a clock: a Rig is advanced by Step with an
// explicit time step, so every model is tested with exact, injected time.
// All quantities are SI: A, V, Ω, H, A/m, T, Wb-turns, s, °C.
package physics
