"""The built-in low-order aerodynamic model of a hatchback's rear package.

A cheap evaluator of a single-element rear wing above the hatch, a flap on the
rear window and the body, with their interaction. It is a low-order model for
ranking and planning, not for certifying loads: potential flow with fixed
separation, a 2-D centreline standing for the 3-D body through one documented
factor and a relief length, empirical stall, slant and base terms checked
against published data (docs/physics.md), no yaw, no cooling flow, no
rotating wheels.

=====================  ==========================================================
module                 job
=====================  ==========================================================
``sections``           NACA 4-digit geometry; sections from coordinate files
``panels``             2-D linear-strength vortex panel method, several bodies, ground image
``section_analysis``   lift, moment and pressures of an isolated section (``doe section``);
                       its viscous, stall-limited lift curve in free air or over the road
``lifting_line``       Glauert's lifting-line solution; endplate effective aspect ratio
``drag``               skin friction, form factor, stall measure and smooth limit
``atmosphere``         ISO 2533 sea-level air; Sutherland viscosity
``car``                the parametric hatchback centreline, flap and wing contours
``model``              the whole rear package: inputs, coefficients, outputs
``choices``            choice knobs (wing section, flap placement, flap and wing on/off) as geometry
=====================  ==========================================================

Sign convention: lift coefficients and CLA are positive upward, so negative
CLA is downforce; CDA is positive rearward.
"""
from .car import CarGeometry
from .choices import CHOICE_INPUTS, ChoiceModel
from .lifting_line import endplate_aspect_ratio, glauert
from .model import (COEFFICIENT_RANGES, DESIGN_INPUTS, OUTPUTS, Coefficients, ModelSettings, RearPackageModel)
from .panels import Layout, solve_field
from .section_analysis import SectionResult, analyse_section, section_lift_curve
from .sections import Section, naca4, read_coords, repanel

__all__ = ["CarGeometry", "CHOICE_INPUTS", "ChoiceModel", "Coefficients", "COEFFICIENT_RANGES", "DESIGN_INPUTS", "OUTPUTS", "ModelSettings",
           "RearPackageModel", "Layout", "solve_field", "Section", "naca4", "read_coords", "repanel",
           "SectionResult", "analyse_section", "section_lift_curve", "glauert", "endplate_aspect_ratio"]
