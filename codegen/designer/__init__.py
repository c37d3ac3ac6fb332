"""designer"""
