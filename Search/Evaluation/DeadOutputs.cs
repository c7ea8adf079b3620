namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Bounds the memory held by the outputs of finished trials. A trial's outputs (each run's copy and the whole, for
/// every sample) are large managed arrays that die as soon as the trial is compared, but the collector frees them only
/// when its own allocation budget says so, which lets hundreds of MiB of dead outputs pile up between collections:
/// measured on the OCR recogniser at 32 images, the working set grew by about 65 MiB per trial (from 634 to 1068 MiB
/// over 7 trials) with no collection. Counting what dies and collecting once it passes the allowance the sweep's memory
/// plan set aside (<see cref="SweepMemory"/>) keeps them inside <see cref="TrialSessionOptions.MaxSweepMemoryBytes"/>;
/// a collection took 3-7 ms there, against about 460 ms per trial.
/// </summary>
internal sealed class DeadOutputs(long allowanceBytes)
{
    private long _dead;

    /// <summary>Collections this bound asked for.</summary>
    public int Collections { get; private set; }

    /// <summary>Counts the outputs of a compared trial as dead (those that are the reference's own arrays stay alive) and collects past the allowance.</summary>
    public void Add(IReadOnlyList<OutputTensor> outputs, IReadOnlyList<OutputTensor> reference)
    {
        foreach (var output in outputs)
        {
            if (!reference.Any(r => ReferenceEquals(r.Data, output.Data)))
            {
                // The whole output and, before it was put together, each run's part of it.
                _dead += 2L * output.Data.Length * sizeof(float);
            }
        }

        if (_dead > allowanceBytes)
        {
            GC.Collect();
            Collections++;
            _dead = 0;
        }
    }
}
