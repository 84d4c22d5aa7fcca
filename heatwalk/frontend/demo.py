"""``heatwalk demo``: fit, sample and evaluate the built-in invented torsion-angle scenario.

Everything goes into one folder (``--out``, default ``demo-output``), written under a temporary name and
renamed into place when the demo is done: the training data, the held-out data, the model folder, the
samples, the pictures and the report (demo_report.json, demo_report.txt). The report follows the one
report schema of ``heatwalk evaluate`` (:mod:`heatwalk.frontend.report_schema`), on the 2,000 held-out
pairs, with the metrics of uniform angles beside those of the model's samples
(``sample_metrics.uniform_baseline``). An existing folder is replaced only with ``--overwrite``, and only
when it is a demo folder, a model or report folder, or empty.
"""

from __future__ import annotations


def cmd_demo(args) -> int:
    import heatwalk
    from heatwalk.frontend.commands import settle
    from heatwalk.frontend.demo_data import lanternfold_torsions
    from heatwalk.frontend.evaluation import evaluate, format_table, write_pictures, write_report
    from heatwalk.frontend.flags import demo_flags
    from heatwalk.frontend.plots import plot, save_figure
    from heatwalk.io.atomic import DEMO_REPORT, atomic_dir
    from heatwalk.io.output_paths import check_output_path
    from heatwalk.io.tables import write_points
    from heatwalk.spaces import Torus

    settle(args, demo_flags())
    out = check_output_path(args.out, kind="folder", overwrite=args.overwrite)
    space = Torus(2)
    data = space.validate(lanternfold_torsions(6000, seed=args.seed))
    train, heldout = data[:4000], data[4000:]
    print("demo: fitting backbone torsions (phi, psi) of the invented 'lanternfold' peptide family on T^2")
    with atomic_dir(out, overwrite=args.overwrite) as folder:  # the demo's folder appears whole, or not at all
        write_points(folder / "lanternfold_torsions.csv", space, train)
        write_points(folder / "heldout.csv", space, heldout)
        model = heatwalk.fit(space, train, steps=args.train_steps, batch_size=512, seed=args.seed,
                             progress=not args.quiet)
        model.save(folder / "model")
        result = evaluate(model, heldout, seed=args.seed, sample_steps=args.reverse_steps,
                          sampler="predictor_corrector", likelihood_points=args.likelihood_points,
                          progress=not args.quiet, command="demo", data_file=out / "heldout.csv",
                          columns=space.column_names(), model_folder=out / "model", uniform_baseline=True)
        write_points(folder / "samples.csv", space, result.samples)
        written = [folder / "samples.csv", *write_report(folder, result.report, name=DEMO_REPORT[:-len(".json")])]
        fig = plot(space, train, result.samples, degrees=True, columns=["phi", "psi"],
                   title="lanternfold torsions: density of heatwalk samples, training data over it")
        written.append(save_figure(fig, folder / "torsions.png", overwrite=True))
        written += write_pictures(folder, model, heldout, result, space_picture=False)
    print(format_table(result.report))
    print("wrote " + ", ".join(str(out / p.name) for p in [*written, out / "model"]))
    return 0
