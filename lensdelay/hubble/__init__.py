"""hubble"""
