"""The guided capture workflow: plan, settle rule, run and resume, simulated bench."""
