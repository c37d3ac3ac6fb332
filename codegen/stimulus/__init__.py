"""stimulus"""
