"""Closed-form reference solutions that the validation suite compares openEMS results against."""
