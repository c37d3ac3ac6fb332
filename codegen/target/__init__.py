"""target"""
