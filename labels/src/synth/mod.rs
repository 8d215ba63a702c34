//! The synthetic plant: labelled P&ID sheets for the demo and the tests.
