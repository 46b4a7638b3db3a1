# named end points for `chairqm run --until STAGE`


rule until_intake:
    input:
        expand("{mol}/substituents.csv", mol=MOLECULES),
