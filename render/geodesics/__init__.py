"""geodesics"""
