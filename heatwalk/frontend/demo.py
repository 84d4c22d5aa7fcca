"""``heatwalk demo``: fit, sample and evaluate the built-in invented torsion-angle scenario.

Everything goes into one folder (``--out``, default ``demo-output``), written under a temporary name and
renamed into place when the demo is done: the training data, the held-out data, the model folder, the
samples, the picture and ``demo_report.json``. An existing folder is replaced only with ``--overwrite``,
and only when it is a demo folder, a model or report folder, or empty.
"""

from __future__ import annotations


def cmd_demo(args) -> int:
    import numpy as np
    import torch

    import heatwalk
    from heatwalk.frontend.demo_data import lanternfold_torsions
    from heatwalk.frontend.commands import settle
    from heatwalk.frontend.flags import demo_flags
    from heatwalk.frontend.evaluation import sample_metrics
    from heatwalk.frontend.plots import plot_data_and_samples
    from heatwalk.io.atomic import DEMO_REPORT, atomic_dir, write_json
    from heatwalk.io.output_paths import check_output_path
    from heatwalk.io.tables import write_points
    from heatwalk.spaces import Torus

    settle(args, demo_flags())
    out = check_output_path(args.out, kind="folder", overwrite=args.overwrite)
    space = Torus(2)
    data = space.validate(lanternfold_torsions(6000, seed=args.seed))
    train, held_a, held_b = data[:4000], data[4000:5000], data[5000:]
    print("demo: fitting backbone torsions (phi, psi) of the invented 'lanternfold' peptide family on T^2")
    with atomic_dir(out, overwrite=args.overwrite) as folder:  # the demo's folder appears whole, or not at all
        write_points(folder / "lanternfold_torsions.csv", space, train)
        write_points(folder / "heldout.csv", space, data[4000:])
        model = heatwalk.fit(space, train, steps=args.train_steps, batch_size=512, seed=args.seed,
                             progress=not args.quiet)
        model.save(folder / "model")
        samples = model.sample(2000, steps=args.reverse_steps, sampler="predictor_corrector", seed=args.seed,
                               progress=not args.quiet)
        write_points(folder / "samples.csv", space, samples)
        uniform = space.random_uniform(2000, torch.Generator().manual_seed(args.seed + 1))
        m_model = sample_metrics(space, samples, held_a, held_b)
        m_unif = sample_metrics(space, uniform, held_a, held_b, bandwidth=m_model["mmd2"]["bandwidth"])
        report = {"space": space.config(), "n_train": 4000, "n_heldout": [1000, 1000], "seed": args.seed,
                  "fit": model.record, "model_samples": m_model, "uniform_samples": m_unif}
        write_json(folder / DEMO_REPORT, report)
        pic = plot_data_and_samples(space, train, samples, folder / "torsions.png",
                                    title="lanternfold torsions: data vs heatwalk samples")
    mm, mu = m_model["mmd2"], m_unif["mmd2"]
    print(f"  MMD^2 (geodesic Gaussian kernel, bandwidth {mm['bandwidth']:.3f} rad): "
          f"model {mm['model_vs_a']:.5f}, uniform {mu['model_vs_a']:.5f}, noise floor {mm['noise_floor_b_vs_a']:.5f}")
    w_model = m_model["wasserstein1_per_angle_rad"]["model_vs_a"]
    w_unif = m_unif["wasserstein1_per_angle_rad"]["model_vs_a"]
    print(f"  W1 per angle (rad): model {np.round(w_model, 4).tolist()}, uniform {np.round(w_unif, 4).tolist()}")
    picture = f"{out / pic.name}, " if pic else ""
    print(f"  wrote {out / 'samples.csv'}, {picture}{out / DEMO_REPORT}, {out / 'model'}")
    return 0
