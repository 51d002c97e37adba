"""Predictors: every way of producing the picture at time t from its two references (one interface)."""
