"""lensing"""
