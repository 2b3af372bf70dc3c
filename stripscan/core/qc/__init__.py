"""Processor QC: the day's values, operating levels, control limits, trend rules, status and crossover."""
