"""light"""
