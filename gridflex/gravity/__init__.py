"""Gravity: closed-form prisms, Parker series of interfaces, anomalies, first-order filters."""
