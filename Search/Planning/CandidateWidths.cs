using Bitbudget.Search.Onnx;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Planning;

/// <summary>
/// Which candidate widths a storage rule tells apart. Under container storage a width only saves bytes when its
/// container is smaller than the next wider width's: below opset 21 every width from 2 to 8 takes one byte, at
/// opset 21 2-4 bits take half a byte and 5-8 bits one byte. Trials on a width that saves nothing buy only error.
/// </summary>
public static class CandidateWidths
{
    /// <summary>Default candidates: FP32, FP16 and the integer widths with a container of their own; packed storage keeps <see cref="SearchSettings.DefaultBits"/>.</summary>
    public static IReadOnlyList<int> Defaults(StorageRule storage, long opset) =>
        storage == StorageRule.Packed ? SearchSettings.DefaultBits
        : opset >= WeightStorage.Int4Opset ? [4, 8, BitWidths.Float16, BitWidths.Float32]
        : [8, BitWidths.Float16, BitWidths.Float32];

    /// <summary>Integer widths that a wider integer width stores in the same container, so they save nothing over it.</summary>
    public static IReadOnlyList<int> SavingNothing(IEnumerable<int> bits, StorageRule storage, long opset)
    {
        if (storage == StorageRule.Packed)
        {
            return [];
        }

        return bits.Where(BitWidths.IsInteger)
            .Where(b => Enumerable.Range(b + 1, BitWidths.MaxInteger - b).Any(wider => ContainerBits(wider, opset) == ContainerBits(b, opset)))
            .Distinct()
            .Order()
            .ToList();
    }

    /// <summary>Bits the container of an integer width takes at an opset.</summary>
    public static int ContainerBits(int bits, long opset) => WeightStorage.ContainerBits(new LayerSetting(bits), opset);
}
