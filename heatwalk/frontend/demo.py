"""``heatwalk demo``: fit, sample and evaluate the built-in invented torsion-angle scenario.

The report (report.json, report.txt) follows the one report schema of ``heatwalk evaluate``
(:mod:`heatwalk.frontend.report_schema`), on the 2,000 held-out pairs, with the metrics of uniform
angles beside those of the model's samples (``sample_metrics.uniform_baseline``).
"""

from __future__ import annotations

from pathlib import Path


def cmd_demo(args) -> int:
    import heatwalk
    from heatwalk.frontend.demo_data import lanternfold_torsions
    from heatwalk.frontend.evaluation import evaluate, format_table, write_pictures, write_report
    from heatwalk.frontend.flags import apply_defaults, demo_flags
    from heatwalk.frontend.plots import plot, save_figure
    from heatwalk.io.tables import write_points
    from heatwalk.spaces import Torus

    apply_defaults(args, demo_flags())
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    space = Torus(2)
    data = space.validate(lanternfold_torsions(6000, seed=args.seed))
    train, heldout = data[:4000], data[4000:]
    print("demo: fitting backbone torsions (phi, psi) of the invented 'lanternfold' peptide family on T^2")
    write_points(out / "lanternfold_torsions.csv", space, train, overwrite=True)
    write_points(out / "heldout.csv", space, heldout, overwrite=True)
    model = heatwalk.fit(space, train, steps=args.train_steps, batch_size=512, seed=args.seed, progress=not args.quiet)
    model.save(out / "model", overwrite=True)
    result = evaluate(model, heldout, seed=args.seed, sample_steps=args.reverse_steps, sampler="predictor_corrector",
                      likelihood_points=args.likelihood_points, progress=not args.quiet, command="demo",
                      data_file=out / "heldout.csv", columns=space.column_names(), model_folder=out / "model",
                      uniform_baseline=True)
    write_points(out / "samples.csv", space, result.samples, overwrite=True)
    written = [out / "samples.csv", *write_report(out, result.report, name="report")]
    fig = plot(space, train, result.samples, degrees=True, columns=["phi", "psi"],
               title="lanternfold torsions: density of heatwalk samples, training data over it")
    written.append(save_figure(fig, out / "torsions.png", overwrite=True))
    written += write_pictures(out, model, heldout, result, space_picture=False)
    print(format_table(result.report))
    print("wrote " + ", ".join(map(str, [*written, out / "model"])))
    return 0
