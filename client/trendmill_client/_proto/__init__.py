"""Generated from proto/trendmill/v1 by scripts/gen_proto.py; do not edit."""
