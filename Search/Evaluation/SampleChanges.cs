using System.Runtime.InteropServices;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// How many calibration samples a trial changed: a sample counts when any bit of any of its output rows
/// differs from the FP32 reference. This is how coverage is judged: a layer whose trials change no sample
/// at any width was never reached by the calibration data (or only ever saw zeros).
/// </summary>
public static class SampleChanges
{
    /// <summary>
    /// Samples (0..<paramref name="sampleCount"/>) whose outputs differ bit for bit. Each output's samples lie
    /// along its own sample axis (<see cref="OutputTensor.SampleAxis"/>); an output without one (one value per
    /// run, or an axis of another size) cannot be split by sample, so any change in it counts every sample as changed.
    /// </summary>
    public static int Count(IReadOnlyList<OutputTensor> reference, IReadOnlyList<OutputTensor> trial, int sampleCount)
    {
        ArgumentNullException.ThrowIfNull(reference);
        ArgumentNullException.ThrowIfNull(trial);
        if (sampleCount <= 0)
        {
            return 0;
        }

        var changed = new bool[sampleCount];
        var count = 0;
        for (var o = 0; o < reference.Count && count < sampleCount; o++)
        {
            // Bitwise, not numeric: -0 vs +0 and NaN payloads are changes too, and the integer compare vectorises.
            var r = MemoryMarshal.Cast<float, int>(reference[o].Data.AsSpan());
            var t = MemoryMarshal.Cast<float, int>(trial[o].Data.AsSpan());
            if (reference[o].SampleAxis is not int axis || axis >= reference[o].Shape.Count || reference[o].Shape[axis] != sampleCount)
            {
                if (!r.SequenceEqual(t))
                {
                    return sampleCount;
                }

                continue;
            }

            // A sample's values are `inner` long and repeat every sampleCount x inner values, `outer` times.
            var (outer, _, inner) = SampleSlicer.Split(reference[o].Shape, axis);
            for (var s = 0; s < sampleCount; s++)
            {
                for (var block = 0L; block < outer && !changed[s]; block++)
                {
                    var start = (int)(((block * sampleCount) + s) * inner);
                    if (!r.Slice(start, (int)inner).SequenceEqual(t.Slice(start, (int)inner)))
                    {
                        changed[s] = true;
                        count++;
                    }
                }
            }
        }

        return count;
    }
}
